"""A sync killed at any moment (``SIGKILL``) loses no record and, sent again, doubles none.

The phone got no answer, so it sends the same batch again; the plan must then hold
each record exactly once, whatever the moment of the kill.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from fieldplan.field.sync import apply_records, journal_records, read_journal
from fieldplan.store import load_plan
from tests.test_field_sync import crew_points, digest, made, taken, unreachable  # noqa: F401

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL")

CHILD = """
import json, os, signal, sys
import fieldplan.field.mark as mark
import fieldplan.field.record as record
import fieldplan.field.sync as sync
import fieldplan.results as results

plan, batch_file, stage = sys.argv[1:4]


def killed_after(fn):
    def run(*args, **kwargs):
        out = fn(*args, **kwargs)
        os.kill(os.getpid(), signal.SIGKILL)
        return out
    return run


if stage == "journal":
    sync._append_journal = killed_after(sync._append_journal)
elif stage == "mark":
    mark.mark_points = killed_after(mark.mark_points)
elif stage == "round":
    results.append_round = killed_after(results.append_round)
elif stage == "positions":
    record.record_positions = killed_after(record.record_positions)
batch = json.load(open(batch_file))
print("ready", flush=True)
sync.apply_records(plan, batch, crew=1)
"""

#: Where the kill lands: right after the records reach the journal, after the unreachable point
#: is marked, after the day's round is stored, after the positions are stored (before the journal
#: says so), and at a moment picked by the clock.
STAGES = ["journal", "mark", "round", "positions", "clock"]


def _batch(plan_dir: Path) -> list[dict]:
    pts, ll = crew_points(plan_dir, 1)
    rows = [r._asdict() for r in pts.itertuples(index=False)]
    batch = [taken(rows[i], ll[i], value=20.0 + i, minute=i) for i in range(3)]
    batch.append(unreachable(rows[3]))
    return batch


@pytest.mark.parametrize("stage", STAGES)
def test_killed_sync_then_resend_stores_each_record_once(made, tmp_path, monkeypatch, stage):  # noqa: F811
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    plan_dir = Path(shutil.copytree(made, tmp_path / "workspace" / "harvest"))
    batch = _batch(plan_dir)
    batch_file = tmp_path / "batch.json"
    batch_file.write_text(json.dumps(batch))
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).parents[1])}
    child = subprocess.Popen(
        [sys.executable, "-c", CHILD, str(plan_dir), str(batch_file), stage],
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
        env=env,
    )
    assert child.stdout.readline().strip() == "ready"
    if stage == "clock":
        time.sleep(0.4)
        child.send_signal(signal.SIGKILL)
    assert child.wait(60) == -signal.SIGKILL

    apply_records(plan_dir, batch, crew=1)  # the phone, with no answer, sends the batch again
    plan = load_plan(plan_dir)
    results = plan.layers["results"]
    latest = results[results["round"] == results["round"].max()]
    assert sorted(latest["value"].astype(float)) == [20.0, 21.0, 22.0]
    assert sorted(plan.layers["actual"]["point_id"]) == sorted(r["point_id"] for r in batch[:3])
    events = plan.layers["events"]
    assert list(events["point_id"]) == [batch[3]["point_id"]]
    assert batch[3]["id"] in events["reason"].iloc[0]
    kept = journal_records(read_journal(plan_dir))
    assert sorted(r["id"] for r in kept) == sorted(r["id"] for r in batch)
    before = digest(plan_dir / "plan.gpkg")
    again = apply_records(plan_dir, batch, crew=1)
    assert again.stored == [] and digest(plan_dir / "plan.gpkg") == before
