"""Targets reached from above or below, far-off targets refused, earlier rounds, dates with years."""

from __future__ import annotations

import json
import math
import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.errors import InputError
from fieldplan.estimate.readiness import check_target, prob_reached, project_date, target_direction

ROOT = Path(__file__).resolve().parents[1]
ROUND1 = ROOT / "demo_plots" / "results_round1.csv"
ROUND2 = ROOT / "demo_plots" / "results_round2.csv"
runner = CliRunner()


def test_probability_from_above_is_the_other_tail():
    mean, se, df = np.array([6.1, 5.2]), np.array([0.2, 0.3]), np.array([9.0, 14.0])
    below = prob_reached(mean, se, df, 5.5, direction="below")
    # reference: scipy.stats.t.sf — P(mu <= target) = 1 - F_t((ybar - target)/se; df)
    np.testing.assert_allclose(below, stats.t.sf((mean - 5.5) / se, df), rtol=1e-12)
    np.testing.assert_allclose(below + prob_reached(mean, se, df, 5.5), 1.0, rtol=1e-12)


def test_falling_trend_projects_to_a_target_below():
    dates = ["2026-02-01", "2026-02-11"]
    p = project_date(dates, [9.0, 8.0], [0.05, 0.05], 6.5, direction="below")
    # reference: elementary algebra, a line falling 0.1 g/L a day from 8.0 on 11 Feb reaches 6.5
    # 15 days later, on 26 Feb
    assert p.date == pd.Timestamp("2026-02-26")
    wrong_way = project_date(dates, [9.0, 8.0], [0.05, 0.05], 6.5, direction="above")
    assert wrong_way.date is None and "away from a target" in wrong_way.note


def test_acidity_defaults_to_a_target_reached_from_above():
    # common practice, no source: titratable acidity falls as grapes ripen, sugar rises
    assert target_direction("titratable_acidity_g_l")[0] == "below"
    assert target_direction("brix") == ("above", "")
    assert target_direction("titratable_acidity_g_l", below=False) == ("above", "")


def test_far_target_refused():
    values = [19.8, 21.0, 22.4, 26.1]
    check_target(values, 24.0, value="brix")
    # common practice, no source: a target 10x the measured values is a typo or a unit mix-up
    with pytest.raises(InputError, match="far outside the observed brix values"):
        check_target(values, 230.0, value="brix")
    with pytest.raises(InputError, match="decimal point"):
        check_target(values, 2.3, value="brix")


@pytest.fixture(scope="module")
def demo_with_rounds(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "plan"
    assert runner.invoke(app, ["demo", "--out", str(out), "-q"]).exit_code == 0
    for f in (ROUND1, ROUND2):
        assert runner.invoke(app, ["results", str(out), str(f), "-q"]).exit_code == 0
    return out


@pytest.fixture
def plan_dir(demo_with_rounds, tmp_path):
    dst = tmp_path / "plan"
    shutil.copytree(demo_with_rounds, dst)
    return dst


def test_round_option_reports_an_earlier_round(plan_dir):
    res = runner.invoke(app, ["estimate", str(plan_dir), "--variable", "brix", "--round", "1"])
    assert res.exit_code == 0, res.output
    assert "round 1 of 2026-02-03" in res.stdout
    est = pd.read_csv(plan_dir / "estimates.csv").set_index("group")
    raw = pd.read_csv(ROUND1)
    v02 = raw.loc[raw["point_id"].str.startswith("V02-"), "brix"].astype(float).to_numpy()
    # reference: t interval with n-1 df and s/sqrt(n), scipy.stats.t.interval, on round 1's file
    lo, hi = stats.t.interval(0.95, len(v02) - 1, loc=v02.mean(), scale=stats.sem(v02))
    assert est.loc["V02", "round"] == 1
    assert est.loc["V02", "mean"] == pytest.approx(v02.mean(), rel=1e-6)
    assert est.loc["V02", "lower"] == pytest.approx(lo, rel=1e-5)
    missing = runner.invoke(app, ["estimate", str(plan_dir), "--variable", "brix", "--round", "5"])
    assert missing.exit_code == 2 and "stored rounds: 1, 2" in missing.stderr


def test_printed_dates_carry_years_and_far_target_is_one_line(plan_dir):
    res = runner.invoke(app, ["estimate", str(plan_dir), "--variable", "brix", "--target", "23"])
    assert res.exit_code == 0, res.output
    # ISO 8601 calendar dates (YYYY-MM-DD) everywhere, also both ends of the range
    full = re.findall(r"\d{4}-\d{2}-\d{2} \(\d{4}-\d{2}-\d{2} – \d{4}-\d{2}-\d{2}\)", res.stdout)
    assert len(full) >= 5
    assert not re.search(r"\(\d{2}-\d{2} –", res.stdout)  # no range end without its year
    far = runner.invoke(app, ["estimate", str(plan_dir), "--variable", "brix", "--target", "230"])
    assert far.exit_code == 2 and "far outside" in far.stderr and far.stderr.count("\n") == 1


def test_target_below_on_the_command_line(plan_dir):
    res = runner.invoke(app, ["estimate", str(plan_dir), "--variable", "ph", "--target", "3.3", "--target-below"])
    assert res.exit_code == 0, res.output
    assert "P(≤ target)" in res.stdout
    est = pd.read_csv(plan_dir / "estimates.csv").set_index("group")
    raw = pd.read_csv(ROUND2)
    v01 = pd.to_numeric(raw.loc[raw["point_id"].str.startswith("V01-"), "ph"], errors="coerce").dropna().to_numpy()
    # reference: scipy.stats.t.sf for P(mu <= target)
    p = stats.t.sf((v01.mean() - 3.3) / stats.sem(v01), len(v01) - 1)
    assert est.loc["V01", "p_reached"] == pytest.approx(p, rel=1e-4, abs=1e-9)
    assert (est["direction"] == "below").all()


def test_size_from_a_grid_plan_prints_a_density(plan_dir):
    res = runner.invoke(app, ["size", "--from-plan", str(plan_dir), "--variable", "brix", "--margin-abs", "0.4", "--json"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    import pyogrio

    blocks = pyogrio.read_dataframe(plan_dir / "plan.gpkg", layer="blocks", read_geometry=False)
    points = pyogrio.read_dataframe(plan_dir / "plan.gpkg", layer="points", read_geometry=False)
    area = blocks.loc[blocks["block"].isin(points["block"]), "sampled_area_ha"]
    per_ha = float(out["plan_options"].split("--per-ha ")[1].split()[0])
    # common practice, no source: a grid's points are about density x area, so the density
    # giving n points in a block of median area is n / median area (rounded up)
    assert per_ha == pytest.approx(math.ceil(100 * out["n"] / area.median()) / 100)
    assert out["per"] == "block" and "--design grid" in out["plan_options"]
