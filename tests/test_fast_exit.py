"""The console script ends a completed plan run without the interpreter's teardown.

Nothing else may change: the same files byte for byte, exit handlers still run, other threads
are waited for, and errors exit as before.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

DEMO = Path(__file__).resolve().parents[1] / "demo_plots" / "estate_blocks.geojson"
RUN = "from fieldplan.cli.main import run; run()"  # the console script's entry point
APP = "from fieldplan.cli.main import app; app()"  # the same command, ending as usual


def _plan(code: str, out: Path, *extra: str) -> subprocess.CompletedProcess:
    args = ["plan", str(DEMO), "--spacing", "40", "--seed", "7", "--formats", "core", "--out", str(out), "--force", *extra]
    env = {**os.environ, "SOURCE_DATE_EPOCH": "1800000000"}
    return subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True, env=env, check=False)


def _files(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_fast_end_writes_the_same_plan_as_the_usual_end(tmp_path):
    out = tmp_path / "plan"
    usual = _plan(APP, out, "-q")
    assert usual.returncode == 0, usual.stderr
    expected = _files(out)
    fast = _plan(RUN, out, "-q")
    assert fast.returncode == 0, fast.stderr
    assert (fast.stdout, fast.stderr) == (usual.stdout, usual.stderr)
    assert _files(out) == expected
    assert {"points.csv", "points.geojson", "plan.gpkg", "manifest.json"} <= set(expected)


def test_exit_handlers_still_run_and_their_output_is_flushed(tmp_path):
    code = "import atexit; atexit.register(print, 'handler ran'); " + RUN
    done = _plan(code, tmp_path / "plan")
    assert done.returncode == 0, done.stderr
    assert done.stdout.rstrip().endswith("handler ran")


def test_a_running_thread_is_waited_for(tmp_path):
    flag = tmp_path / "thread-finished"
    code = (
        "import threading, time, pathlib\n"
        f"def late(): time.sleep(0.3); pathlib.Path({str(flag)!r}).write_text('done')\n"
        "threading.Thread(target=late).start()\n" + RUN
    )
    done = _plan(code, tmp_path / "plan", "-q")
    assert done.returncode == 0, done.stderr
    assert flag.read_text() == "done"


def test_an_error_still_exits_2_with_one_line(tmp_path):
    done = _plan(RUN, tmp_path / "plan", "--spacing", "-5", "-q")
    assert done.returncode == 2
    assert done.stderr.startswith("fieldplan: error:") and len(done.stderr.strip().splitlines()) == 1


def test_a_completed_plan_skips_the_teardown_and_other_runs_do_not(tmp_path):
    # An object freed only by the teardown tells whether it happened.
    code = "class Probe:\n    def __del__(self): print('teardown')\nprobe = Probe()\n"
    fast = _plan(code + RUN, tmp_path / "a", "-q")
    usual = _plan(code + APP, tmp_path / "b", "-q")
    failed = _plan(code + RUN, tmp_path / "c", "--spacing", "-5", "-q")
    assert (fast.returncode, usual.returncode, failed.returncode) == (0, 0, 2)
    assert "teardown" not in fast.stdout
    assert "teardown" in usual.stdout and "teardown" in failed.stdout
