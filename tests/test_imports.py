"""Import budget: each command loads only what it uses (no timing is asserted here).

Each case runs a command in a fresh interpreter, in process, and lists which heavy modules are
in ``sys.modules`` afterwards. The whole-process timings live in ``benchmarks/bench_process.py``.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

DEMO = Path(__file__).resolve().parents[1] / "demo_plots" / "estate_blocks.geojson"

_PROBE = """
import json, sys
from fieldplan.cli.main import app
try:
    app(args=json.loads(sys.argv[1]), standalone_mode=False)
except SystemExit:
    pass
print(json.dumps(sorted(sys.modules)))
"""


def _loaded(args: list[str]) -> set[str]:
    out = subprocess.run(
        [sys.executable, "-c", _PROBE, json.dumps(args)], capture_output=True, text=True, check=True
    )
    return set(json.loads(out.stdout.strip().splitlines()[-1]))


def _heavy(loaded: set[str], names: tuple[str, ...]) -> list[str]:
    return [n for n in names if n in loaded]


def test_version_loads_no_science_stack():
    loaded = _loaded(["--version"])
    assert _heavy(loaded, ("numpy", "pandas", "geopandas", "shapely", "scipy", "numba", "matplotlib")) == []


def test_size_loads_no_geometry_and_no_scipy():
    loaded = _loaded(["size", "--cv", "25", "--margin", "10"])
    assert _heavy(loaded, ("geopandas", "shapely", "pyproj", "pyogrio", "pandas", "scipy", "numba")) == []


@pytest.mark.parametrize("design", [["--spacing", "40"], ["--design", "random", "--per-block", "3"]])
def test_core_plan_loads_no_plotting_compiler_or_statistics(tmp_path, design):
    loaded = _loaded(
        ["plan", str(DEMO), *design, "--seed", "7", "--formats", "core", "--out", str(tmp_path / "p"), "-q"]
    )
    assert (tmp_path / "p" / "points.csv").exists()
    plotting = ("matplotlib", "reportlab", "segno", "folium", "branca")
    assert _heavy(loaded, (*plotting, "numba", "scipy.stats", "scipy.spatial", "sklearn")) == []


def test_core_plan_imports_only_its_own_command_module(tmp_path):
    # Subcommands load lazily (fieldplan.cli.main.COMMANDS): a plan run imports plan_cmd and
    # none of the other command modules, nor the web stack that `serve` needs.
    loaded = _loaded(
        ["plan", str(DEMO), "--spacing", "40", "--seed", "7", "--formats", "core", "--out", str(tmp_path / "p"), "-q"]
    )
    assert (tmp_path / "p" / "points.csv").exists()
    assert "fieldplan.cli.plan_cmd" in loaded
    others = [f"fieldplan.cli.{m}" for m in ("serve_cmd", "zones_cmd", "estimate_cmd", "size_cmd", "crews_cmd")]
    assert _heavy(loaded, (*others, "fastapi", "uvicorn", "jinja2", "starlette", "rich")) == []
    # A plain GeoJSON of a few blocks is read without GDAL (fieldplan.read._read_plain_geojson).
    assert "pyogrio" not in loaded
    # A grid plan allocates nothing over strata and draws no plant clusters.
    assert _heavy(loaded, ("fieldplan.design.allocation", "fieldplan.design.clusters")) == []
    # A general-purpose plan takes no soil cores.
    assert "fieldplan.samples.cores" not in loaded


def test_help_lists_every_command_in_order_with_its_one_line_help():
    from typer.testing import CliRunner

    from fieldplan.cli.main import COMMANDS, app, build_command

    result = CliRunner().invoke(app, ["--help"], env={"COLUMNS": "100"})
    assert result.exit_code == 0, result.output
    listed = [line.split()[0] for line in result.output.split("Commands:")[1].splitlines() if line.strip()]
    assert listed == list(COMMANDS)
    for name in COMMANDS:
        first = build_command(name).get_short_help_str(40).rstrip(".")[:20]
        assert first in result.output, name


def test_unknown_command_is_a_usage_error_without_traceback():
    out = subprocess.run(
        [sys.executable, "-c", "from fieldplan.cli.main import run; run()", "plna"], capture_output=True, text=True
    )
    assert out.returncode == 2
    assert "Traceback" not in out.stderr
    assert "Error: No such command 'plna'. Did you mean 'plan'?" in out.stderr


def test_cluster_core_plan_loads_no_compiler_and_no_scipy(tmp_path):
    # The row model and the draw are numpy arrays over all blocks: no numba (nor the scipy.linalg
    # numba pulls in for its BLAS bindings), no scipy at all.
    loaded = _loaded(
        [
            "plan",
            str(DEMO),
            *("--design", "clusters", "--per-block", "4", "--plants-per-cluster", "2"),
            *("--seed", "7", "--formats", "core", "--out", str(tmp_path / "p"), "-q"),
        ]
    )
    assert (tmp_path / "p" / "points.csv").exists()
    assert _heavy(loaded, ("numba", "llvmlite", "scipy", "matplotlib", "sklearn")) == []


def test_png_page_loads_no_matplotlib(tmp_path, monkeypatch):
    monkeypatch.setenv("FIELDPLAN_WRITE_JOBS", "1")  # every writer in the probed process
    loaded = _loaded(
        ["plan", str(DEMO), "--spacing", "40", "--seed", "7", "--formats", "png", "--out", str(tmp_path / "p"), "-q"]
    )
    # reference: PNG specification (ISO/IEC 15948), 8-byte signature
    assert (tmp_path / "p" / "plan.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "PIL.Image" in loaded  # drawn with Pillow
    assert _heavy(loaded, ("matplotlib", "mpl_toolkits", "fontTools", "reportlab")) == []
