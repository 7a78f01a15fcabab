"""Route quality on TSPLIB instances and route/crew speed on 5,000 points.

Figures written to ``benchmarks/bench_routes.json`` (``--out`` to change):

* ``tsplib``: per instance, tour length under TSPLIB ``EUC_2D`` rounding, the
  published optimum (TSPLIB list of optimal solutions, Reinelt 1991; values
  from memory), their ratio and seconds;
* ``large``: 5,000 uniform random points in a 1 km square: wall and CPU
  seconds of one tour, its length against the Beardwood-Halton-Hammersley
  estimate ``0.7124 * sqrt(n * A)`` (asymptotic; boundary effects make the true
  optimum a few per cent higher at this size), and the same for a 6-crew split.
"""

from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path

import numpy as np

from fieldplan.route import Metric, assign_crews, euc2d_length, read_tsplib, route_cost, solve_route

__all__ = ["main", "measure", "study"]

ROOT = Path(__file__).resolve().parents[1]
OPTIMA = {"berlin52": 7542, "st70": 675, "pr76": 108159}  # TSPLIB, from memory
BHH = 0.7124  # Beardwood-Halton-Hammersley constant estimate (Johnson & McGeoch), from memory


def _timed(fn):
    wall, cpu = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - wall, time.process_time() - cpu


def measure(*, points: int = 5000) -> dict:
    """All figures of the benchmark as a JSON-ready dict."""
    result: dict = {"tsplib": [], "large": {}, "cpus": os.cpu_count()}
    for name, optimum in OPTIMA.items():
        xy = read_tsplib(ROOT / "tests" / "data" / "tsplib" / f"{name}.tsp")
        order, wall, cpu = _timed(lambda xy=xy: solve_route(Metric(xy), rng=np.random.default_rng(0)))
        length = euc2d_length(xy, order)
        result["tsplib"].append(
            {
                "instance": name,
                "n": len(xy),
                "length": length,
                "optimum": optimum,
                "ratio": round(length / optimum, 4),
                "seconds": round(wall, 2),
                "cpu_seconds": round(cpu, 2),
            }
        )

    n = points
    xy = np.random.default_rng(2026).uniform(0, 1000, size=(n, 2))
    metric = Metric(xy)
    bhh = BHH * np.sqrt(n * 1000.0 * 1000.0)
    for label, kicks in (("local_search_only", 0), ("default", None)):
        order, wall, cpu = _timed(
            lambda kicks=kicks: solve_route(metric, rng=np.random.default_rng(0), kicks=kicks)
        )
        result["large"][label] = {
            "n": n,
            "seconds": round(wall, 2),
            "cpu_seconds": round(cpu, 2),
            "length_over_bhh": round(route_cost(metric, order, closed=True) / bhh, 4),
        }
    crews, wall, cpu = _timed(
        lambda: assign_crews(xy, n_crews=6, rng=np.random.default_rng(0), start=(500.0, -100.0))
    )
    result["large"]["crews_6"] = {
        "n": n,
        "seconds": round(wall, 2),
        "cpu_seconds": round(cpu, 2),
        "hours": [round(float(h), 2) for h in crews.hours],
        "max_over_mean": round(float(crews.hours.max() / crews.hours.mean()), 4),
    }
    return result


def study(*, smoke: bool = False, seed: int = 0) -> list:
    """The figures as ``benchmarks.timing.Result`` records for the benchmark runner.

    TSPLIB ratios pass at <= 1.05; the 5,000-point times are informational
    (seconds / 60, so below 1 is "under a minute").
    """
    from benchmarks.timing import Result

    figures = measure(points=500 if smoke else 5000)
    out = [
        Result(
            "routes",
            f"TSPLIB {t['instance']}: length / optimum",
            t["ratio"],
            1.05,
            "lower",
            unit="",
            details=t,
        )
        for t in figures["tsplib"]
    ]
    for label, fig in figures["large"].items():
        out.append(
            Result(
                "routes",
                f"{fig['n']} points, {label}: seconds / 60",
                fig["seconds"] / 60.0,
                1.0,
                "lower",
                unit="",
                details=fig,
                informational=True,
            )
        )
    return out


def main(argv: list[str] | None = None) -> dict:
    """Run the benchmark, write the JSON and return its content."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "bench_routes.json")
    ap.add_argument("--points", type=int, default=5000)
    args = ap.parse_args(argv)
    result = measure(points=args.points)
    args.out.write_text(json.dumps(result, indent=2, sort_keys=True) + "\n", encoding="utf-8")
    print(json.dumps(result, indent=2, sort_keys=True))
    return result


if __name__ == "__main__":
    main()
