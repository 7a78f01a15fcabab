"""Run fieldplan's benchmarks and write ``benchmarks/results.md`` and ``results.json``.

``python -m benchmarks.run`` (what ``make bench`` runs) runs every study; each
reports ratios of timings taken in the same run, beside their targets.
``--only NAME ...`` picks studies, ``--smoke`` runs tiny sizes (what the test
suite does so the studies cannot rot) and writes nothing unless ``--out`` is
given. The crew-route and statistical-validity studies run too when their
modules are present (``routes``, ``validity``).
"""

from __future__ import annotations

import argparse
import gc
import importlib
import inspect
import json
import os
import platform
import sys
import time
from collections.abc import Callable
from pathlib import Path

from benchmarks.timing import Result

__all__ = ["STUDIES", "EXTERNAL", "main", "markdown", "run_studies"]

HERE = Path(__file__).resolve().parent


def _study(module: str, function: str = "study") -> Callable[..., list[Result]]:
    def run(*, smoke: bool = False) -> list[Result]:
        return getattr(importlib.import_module(f"benchmarks.{module}"), function)(smoke=smoke)

    return run


#: Studies of this package, in run order.
STUDIES: dict[str, Callable[..., list[Result]]] = {
    "grid": _study("bench_grid"),
    "random": _study("bench_random"),
    "clusters": _study("bench_clusters"),
    "plan": _study("bench_plan", "study_floor"),
    "scaling": _study("bench_plan", "study_scaling"),
    "dask": _study("bench_dask"),
    "process": _study("bench_process"),
    "zones": _study("zones_bench"),
    "map": _study("bench_map"),
}

#: Studies kept in other modules; run through their ``main(argv)`` when present.
EXTERNAL: dict[str, str] = {"routes": "bench_routes", "validity": "validity", "zones_validity": "zones_validity"}


def run_studies(names: list[str], *, smoke: bool = False, log=print) -> tuple[list[Result], dict[str, float]]:
    """Run the named studies; return their results and the seconds each took."""
    results: list[Result] = []
    seconds: dict[str, float] = {}
    for name in names:
        t0 = time.perf_counter()
        log(f"[bench] {name} ...")
        # What earlier studies left alive would otherwise be scanned by every collection of
        # this one (a study making many small objects, like the map, is charged for it).
        gc.collect()
        gc.freeze()
        try:
            if name in STUDIES:
                results.extend(STUDIES[name](smoke=smoke))
            else:
                results.extend(_run_external(name, smoke=smoke))
        finally:
            gc.unfreeze()
        seconds[name] = round(time.perf_counter() - t0, 2)
        log(f"[bench] {name} done in {seconds[name]:.1f} s")
    return results, seconds


def _run_external(name: str, *, smoke: bool) -> list[Result]:
    """Run another module's study: its ``study(smoke=)`` if it has one, else its ``main``."""
    module = importlib.import_module(f"benchmarks.{EXTERNAL[name]}")
    study = getattr(module, "study", None)
    if study is not None:
        return list(study(smoke=smoke))
    main = getattr(module, "main", None)
    if main is None:
        return []
    if "smoke" in inspect.signature(main).parameters:
        main([], smoke=smoke)
    elif not smoke:
        main([])
    return []


def _available_external() -> list[str]:
    return [name for name, module in EXTERNAL.items() if (HERE / f"{module}.py").exists()]


def _fmt(value: float) -> str:
    if value == 0 or 0.01 <= abs(value) < 10_000:
        return f"{value:.3g}" if abs(value) < 100 else f"{value:,.0f}"
    return f"{value:.2e}"


def markdown(
    results: list[Result], seconds: dict[str, float], *, smoke: bool, load: list | None = None
) -> str:
    """The results table as Markdown."""
    lines = [
        "# fieldplan benchmarks",
        "",
        "Every figure is a ratio of two measurements taken in the same run on the same",
        "machine, so it does not depend on how fast the machine is. Written by",
        "`python -m benchmarks.run` (`make bench`); see `benchmarks/*.py` for each study.",
        "",
        f"Machine: {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}."
        + (" **Smoke run (tiny sizes): figures are not meaningful.**" if smoke else ""),
        *(
            [
                f"Load average (1 min) at start and end: {load[0]:.2f}, {load[1]:.2f}: other work on the machine skews parallel figures most."
            ]
            if load
            else []
        ),
        "",
        "| study | measure | ratio | target | result |",
        "| --- | --- | ---: | ---: | --- |",
    ]
    for r in results:
        sign = "≥" if r.better == "higher" else "≤"
        verdict = "pass" if r.passed else "**miss**"
        if r.informational:
            verdict += " (informational)"
        unit = "" if r.unit in ("x", "k") else f" {r.unit}"
        lines.append(
            f"| {r.study} | {r.name} | {_fmt(r.ratio)}{unit} | {sign} {_fmt(r.target)}{unit} | {verdict} |"
        )
    lines += ["", "## Details", ""]
    for r in results:
        lines.append(f"- **{r.study}: {r.name}**: " + json.dumps(r.details, sort_keys=True))
    lines += ["", "## Seconds per study", ""]
    lines += [f"- {name}: {sec:.1f} s" for name, sec in seconds.items()]
    lines.append("")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    """Command-line entry; returns 0 (a missed target is reported, not an error)."""
    names = [*STUDIES, *EXTERNAL]
    ap = argparse.ArgumentParser(description="Run fieldplan's benchmarks.")
    ap.add_argument(
        "--only", nargs="+", choices=names, metavar="NAME", help=f"studies to run: {', '.join(names)}"
    )
    ap.add_argument("--smoke", action="store_true", help="tiny sizes; writes nothing unless --out is given")
    ap.add_argument("--out", type=Path, help="folder for results.md and results.json (default: benchmarks/)")
    args = ap.parse_args(argv)
    chosen = args.only or [*STUDIES, *([] if args.smoke else _available_external())]
    load = [os.getloadavg()[0]]
    t0 = time.perf_counter()
    results, seconds = run_studies(
        chosen, smoke=args.smoke, log=lambda m: print(m, file=sys.stderr, flush=True)
    )
    seconds["all"] = round(time.perf_counter() - t0, 2)
    load.append(os.getloadavg()[0])
    text = markdown(results, seconds, smoke=args.smoke, load=load)
    print(text)
    out = args.out if args.out is not None else (None if args.smoke else HERE)
    if out is not None:
        out.mkdir(parents=True, exist_ok=True)
        (out / "results.md").write_text(text, encoding="utf-8")
        payload = {
            "smoke": args.smoke,
            "seconds": seconds,
            "load_average": load,
            "results": [r.as_dict() for r in results],
        }
        (out / "results.json").write_text(
            json.dumps(payload, indent=2, sort_keys=True) + "\n", encoding="utf-8"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
