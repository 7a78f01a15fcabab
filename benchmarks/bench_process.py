"""Whole-process timings: what a user waits for, imports included.

Every row runs the installed ``fieldplan`` command as a fresh subprocess and times it against a
baseline process run in turn with it in the same study (best of several runs each, alternating,
so a slow spell of the machine hits both sides):

- the start-up floor: a Python process that imports geopandas and exits (any geopandas tool pays
  this before it reads a byte);
- the read+write floor: a process that reads the same blocks with geopandas and writes as many
  points as the plan has as GeoJSON;
- the plant-listing script: a process that lists every plant of every block (1 m x 2.5 m) and
  picks 30 per block, the direct way to draw plants as clusters.

Each whole-process ratio is reported beside the same comparison made in process (imports
excluded), so the cost of start-up shows as the difference between the two.
"""

from __future__ import annotations

import gc
import os
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

from benchmarks.timing import Result
from benchmarks.workloads import estate, write_geojson

__all__ = ["study", "process_times", "fieldplan_command"]

HERE = Path(__file__).resolve().parent
DEMO = HERE.parent / "demo_plots" / "estate_blocks.geojson"
PICKS = 30


def fieldplan_command() -> list[str]:
    """The installed console script beside this interpreter (what a user runs)."""
    script = Path(sys.executable).parent / "fieldplan"
    if script.exists():
        return [str(script)]
    return [sys.executable, "-c", "from fieldplan.cli.main import run; run()"]


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env.setdefault("SOURCE_DATE_EPOCH", "1790000000")
    # An installed package runs from bytecode; some shells (and sandboxes) set this variable, which
    # would make every run compile fieldplan's sources again and time that instead.
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    return env


def ensure_bytecode() -> None:
    """Compile fieldplan's modules once, as ``pip install`` does for a regular install.

    An editable install (``make``'s) leaves compiling to the first run; without this, a machine
    that never wrote bytecode would time the compiler in every row.
    """
    import compileall

    import fieldplan

    compileall.compile_dir(str(Path(fieldplan.__file__).parent), quiet=1)


def _run(cmd: list[str]) -> float:
    gc.collect()
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, env=_env(), check=False)
    seconds = time.perf_counter() - t0
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed ({proc.returncode}): {proc.stderr.decode()[-800:]}")
    return seconds


def process_times(*commands: list[str], repeat: int) -> list[float]:
    """Best wall-clock seconds of each command, the commands run in turn ``repeat`` times."""
    for cmd in commands:  # warm: page cache, numba cache, PROJ database
        _run(cmd)
    best = [float("inf")] * len(commands)
    for _ in range(repeat):
        for i, cmd in enumerate(commands):
            best[i] = min(best[i], _run(cmd))
    return best


def peak_rss_mb(cmd: list[str]) -> float:
    """Peak resident memory of a command in MB, measured from a fresh parent process."""
    probe = textwrap.dedent(
        f"""
        import resource, subprocess, sys
        subprocess.run({cmd!r}, check=True, capture_output=True)
        print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)
        """
    )
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, env=_env(), check=True)
    return int(out.stdout.strip()) / 1024.0  # ru_maxrss is in kB on Linux


def _script(tmp: Path, name: str, body: str) -> list[str]:
    path = tmp / f"{name}.py"
    path.write_text(textwrap.dedent(body))
    return [sys.executable, str(path)]


def _read_write_floor(tmp: Path, blocks: Path, n_points: int) -> list[str]:
    return _script(
        tmp,
        "read_write_floor",
        f"""
        import geopandas as gpd, numpy as np
        blocks = gpd.read_file({str(blocks)!r}, engine="pyogrio")
        # as many points as the plan has, spread over the blocks' extent
        rng = np.random.default_rng(1)
        x0, y0, x1, y1 = blocks.total_bounds
        pts = gpd.GeoDataFrame(
            {{"point_id": np.arange({n_points})}},
            geometry=gpd.points_from_xy(rng.uniform(x0, x1, {n_points}), rng.uniform(y0, y1, {n_points})),
            crs=blocks.crs,
        )
        pts.to_crs(4326).to_file({str(tmp / "floor.geojson")!r}, driver="GeoJSON", engine="pyogrio")
        """,
    )


def _plant_listing_script(tmp: Path, blocks: Path) -> list[str]:
    # The direct way: every plant position of each block, keep those inside, choose 30.
    return _script(
        tmp,
        "list_plants",
        f"""
        import sys
        sys.path.insert(0, {str(HERE.parent)!r})
        import geopandas as gpd, numpy as np
        from benchmarks.baselines import enumerate_and_choose
        blocks = gpd.read_file({str(blocks)!r}, engine="pyogrio")
        blocks = blocks.to_crs(blocks.estimate_utm_crs())  # GeoJSON is in degrees; plants are in metres
        rng = np.random.default_rng(1)
        picked = [
            enumerate_and_choose(
                poly, row_spacing_m=rs, plant_spacing_m=ps, row_bearing_deg=bearing, n={PICKS}, rng=rng
            )
            for poly, rs, ps, bearing in zip(
                blocks.geometry.values, blocks["row_spacing_m"], blocks["plant_spacing_m"],
                blocks["row_bearing_deg"],
            )
        ]
        pts = np.concatenate(picked)
        assert len(pts) == {PICKS} * len(blocks), len(pts)  # every block gave its plants
        gpd.GeoDataFrame(geometry=gpd.points_from_xy(pts[:, 0], pts[:, 1]), crs=blocks.crs).to_crs(4326).to_file(
            {str(tmp / "plants.geojson")!r}, driver="GeoJSON", engine="pyogrio"
        )
        """,
    )


def _in_process_floor_ratio(blocks: Path, tmp: Path, *, formats, repeat: int) -> float:
    """The same plan-vs-floor comparison in process (imports excluded), for the details."""
    from benchmarks.bench_plan import floor_once, plan_once
    from fieldplan.plan import make_plan
    from fieldplan.read import read_blocks

    points = make_plan(read_blocks(blocks), per_ha=1.0, seed=1).points
    plan_once(blocks, tmp / "inproc_warm", formats=formats)
    plan = min(plan_once(blocks, tmp / f"inproc{i}", formats=formats)["total"] for i in range(repeat))
    floor = min(floor_once(blocks, points, tmp / f"inproc_floor{i}.geojson") for i in range(repeat))
    return plan / floor


def _in_process_cluster_ratio(vines: Path, tmp: Path, *, repeat: int) -> dict:
    """The cluster comparison in process (imports excluded): listing plants vs the plan."""
    import geopandas as gpd
    import numpy as np

    from benchmarks.baselines import enumerate_and_choose
    from fieldplan.plan import make_plan
    from fieldplan.read import read_blocks
    from fieldplan.store import write_plan

    def listing() -> None:
        blocks = gpd.read_file(vines, engine="pyogrio")
        blocks = blocks.to_crs(blocks.estimate_utm_crs())
        rng = np.random.default_rng(1)
        picked = [
            enumerate_and_choose(poly, row_spacing_m=rs, plant_spacing_m=ps, row_bearing_deg=b, n=PICKS, rng=rng)
            for poly, rs, ps, b in zip(
                blocks.geometry.values,
                blocks["row_spacing_m"],
                blocks["plant_spacing_m"],
                blocks["row_bearing_deg"],
                strict=True,
            )
        ]
        pts = np.concatenate(picked)
        gpd.GeoDataFrame(geometry=gpd.points_from_xy(pts[:, 0], pts[:, 1]), crs=blocks.crs).to_crs(4326).to_file(
            tmp / "inproc_plants.geojson", driver="GeoJSON", engine="pyogrio"
        )

    def plan(i: int) -> None:
        spec = {"design": "clusters", "per_block": PICKS, "plants_per_cluster": 1}
        write_plan(make_plan(read_blocks(vines), spec, seed=1), tmp / f"inproc_clusters{i}", force=True, formats=["core"])

    def best(fn, *args) -> float:
        fn(*args)  # warm
        times = []
        for _ in range(repeat):
            gc.collect()
            t0 = time.perf_counter()
            fn(*args)
            times.append(time.perf_counter() - t0)
        return min(times)

    t_list, t_plan = best(listing), best(plan, 0)
    return {"in_process_speed_up": round(t_list / t_plan, 2), "in_process_seconds_fieldplan": round(t_plan, 3),
            "in_process_seconds_listing": round(t_list, 3)}


def study(*, smoke: bool = False, seed: int = 31) -> list[Result]:
    """Whole-process rows: small demo plan, size/version, 1,000-block grid and cluster plans."""
    repeat = 1 if smoke else 5
    n_big = 20 if smoke else 1000
    fp = fieldplan_command()
    ensure_bytecode()
    results: list[Result] = []
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        startup = [sys.executable, "-c", "import geopandas"]

        # The 14-block demo estate.
        demo_core = [*fp, "plan", str(DEMO), "--spacing", "40", "--seed", "7", "--formats", "core"]
        demo_core += ["--out", str(tmp / "demo_core"), "--force", "-q"]
        demo_all = [*fp, "plan", str(DEMO), "--spacing", "40", "--seed", "7"]
        demo_all += ["--out", str(tmp / "demo_all"), "--force", "-q"]
        size = [*fp, "size", "--cv", "25", "--margin", "10"]
        version = [*fp, "--version"]
        t_floor, t_core, t_all, t_size, t_version = process_times(
            startup, demo_core, demo_all, size, version, repeat=repeat
        )
        common = {"seconds_startup_floor": round(t_floor, 3), "repeats": repeat}
        results += [
            Result(
                "process",
                "14-block demo plan --formats core vs start-up floor (import geopandas)",
                t_core / t_floor,
                1.3,
                "lower",
                details={**common, "seconds": round(t_core, 3), "command": "fieldplan plan DEMO --formats core"},
            ),
            Result(
                "process",
                "14-block demo plan, all formats vs start-up floor",
                t_all / t_floor,
                2.0,
                "lower",
                details={**common, "seconds": round(t_all, 3)},
            ),
            Result(
                "process",
                "fieldplan size vs start-up floor",
                t_size / t_floor,
                0.5,
                "lower",
                details={**common, "seconds": round(t_size, 3)},
            ),
            Result(
                "process",
                "fieldplan --version vs start-up floor",
                t_version / t_floor,
                0.5,
                "lower",
                details={**common, "seconds": round(t_version, 3)},
            ),
        ]

        # 1,000 blocks (about 20,000 ha) at 1 point/ha.
        big = write_geojson(estate(n_big, seed=seed), tmp / "big.geojson")
        from fieldplan.plan import make_plan
        from fieldplan.read import read_blocks

        n_points = len(make_plan(read_blocks(big), per_ha=1.0, seed=1).points)
        readwrite = _read_write_floor(tmp, big, n_points)
        grid_core = [*fp, "plan", str(big), "--per-ha", "1", "--seed", "1", "--formats", "core"]
        grid_core += ["--out", str(tmp / "grid_core"), "--force", "-q"]
        grid_all = [*fp, "plan", str(big), "--per-ha", "1", "--seed", "1"]
        grid_all += ["--out", str(tmp / "grid_all"), "--force", "-q"]
        t_rw, t_gcore, t_gall = process_times(readwrite, grid_core, grid_all, repeat=repeat)
        inproc_core = _in_process_floor_ratio(big, tmp, formats=("core",), repeat=repeat)
        inproc_all = _in_process_floor_ratio(big, tmp, formats=None, repeat=repeat)
        common = {"blocks": n_big, "points": n_points, "seconds_read_write_floor": round(t_rw, 3)}
        results += [
            Result(
                "process",
                f"{n_big}-block grid plan --formats core vs read+write floor process",
                t_gcore / t_rw,
                1.5,
                "lower",
                details={**common, "seconds": round(t_gcore, 3), "in_process_ratio": round(inproc_core, 3)},
            ),
            Result(
                "process",
                f"{n_big}-block grid plan, all formats vs read+write floor process",
                t_gall / t_rw,
                2.5,
                "lower",
                details={**common, "seconds": round(t_gall, 3), "in_process_ratio": round(inproc_all, 3)},
            ),
        ]

        # 1,000 vineyard blocks (mean about 4 ha) at 2.5 m x 1 m, 30 plants per block.
        vines = estate(n_big, seed=seed + 1, max_ha=10.0, row_spacing_m=(2.5, 2.5), plant_spacing_m=(1.0, 1.0))
        vines_path = write_geojson(vines, tmp / "vines.geojson")
        clusters = [*fp, "plan", str(vines_path), "--design", "clusters", "--per-block", str(PICKS)]
        clusters += ["--plants-per-cluster", "1", "--seed", "1", "--formats", "core"]
        clusters += ["--out", str(tmp / "clusters"), "--force", "-q"]
        listing = _plant_listing_script(tmp, vines_path)
        t_list, t_clusters = process_times(listing, clusters, repeat=repeat)
        plants = float((vines.area / (2.5 * 1.0)).sum())
        inproc_clusters = _in_process_cluster_ratio(vines_path, tmp, repeat=repeat)
        results.append(
            Result(
                "process",
                f"{n_big}-block cluster plan --formats core: speed-up over listing every plant",
                t_list / t_clusters,
                5.0,
                "higher",
                details={
                    "blocks": n_big,
                    "plants_approx": round(plants),
                    "seconds_fieldplan": round(t_clusters, 3),
                    "seconds_listing_script": round(t_list, 3),
                    "goal": 10.0,
                    **inproc_clusters,
                },
            )
        )
        peak = peak_rss_mb(clusters)
        results.append(
            Result(
                "process",
                f"{n_big}-block cluster plan --formats core: peak memory",
                peak / 1024.0,
                0.5,
                "lower",
                unit="GB",
                details={"peak_rss_mb": round(peak, 1), "how": "ru_maxrss of the child process"},
            )
        )
    return results
