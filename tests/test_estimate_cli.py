"""`fieldplan results` and `fieldplan estimate` on the demo estate."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from typer.testing import CliRunner

from fieldplan.cli.main import app

ROOT = Path(__file__).resolve().parents[1]
ROUND1 = ROOT / "demo_plots" / "results_round1.csv"
ROUND2 = ROOT / "demo_plots" / "results_round2.csv"
runner = CliRunner()


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "plan"
    res = runner.invoke(app, ["demo", "--out", str(out), "-q"])
    assert res.exit_code == 0, res.output
    return out


@pytest.fixture
def plan_dir(demo_dir, tmp_path):
    dst = tmp_path / "plan"
    shutil.copytree(demo_dir, dst)
    return dst


def _layer(plan_dir):
    import pyogrio

    return pyogrio.read_dataframe(plan_dir / "plan.gpkg", layer="results")


def test_results_rounds_append_and_refuse_reimport(plan_dir):
    r1 = runner.invoke(app, ["results", str(plan_dir), str(ROUND1)])
    assert r1.exit_code == 0, r1.output
    # The invented file carries three deliberate mistakes; each is listed by row number
    # (header = row 1, common practice, no source) and the other rows are kept.
    assert "row 6: V01-005 [brix] not a number" in r1.stderr
    assert "row 13: V01-012 [ph] out of plausible range" in r1.stderr
    assert "row 184: V10-001 [point_id] unmatched point id" in r1.stderr
    first = _layer(plan_dir)
    assert set(first["round"]) == {1}

    again = runner.invoke(app, ["results", str(plan_dir), str(ROUND1)])
    assert again.exit_code == 2 and "already imported as round 1" in again.stderr

    r2 = runner.invoke(app, ["results", str(plan_dir), str(ROUND2)])
    assert r2.exit_code == 0, r2.output
    both = _layer(plan_dir)
    assert set(both["round"]) == {1, 2}
    # round 1 rows are untouched by the second import
    kept = both[both["round"] == 1].reset_index(drop=True)
    pd.testing.assert_frame_equal(kept, first, check_dtype=False)

    dup = runner.invoke(app, ["results", str(plan_dir), str(ROUND1), "--allow-duplicate"])
    assert dup.exit_code == 0 and "round 3" in dup.stdout


def test_estimate_block_intervals_and_readiness(plan_dir):
    for f in (ROUND1, ROUND2):
        assert runner.invoke(app, ["results", str(plan_dir), str(f)]).exit_code == 0
    res = runner.invoke(app, ["estimate", str(plan_dir), "--variable", "brix", "--target", "23"])
    assert res.exit_code == 0, res.output
    assert "V09" in res.stdout and "no interval (1 point)" in res.stdout
    est = pd.read_csv(plan_dir / "estimates.csv").set_index("group")
    raw = pd.read_csv(ROUND2)
    v01 = raw.loc[raw["point_id"].str.startswith("V01-"), "brix"].astype(float).to_numpy()
    # reference: t interval with n-1 df and s/sqrt(n), scipy.stats.t.interval
    lo, hi = stats.t.interval(0.95, len(v01) - 1, loc=v01.mean(), scale=stats.sem(v01))
    assert est.loc["V01", "mean"] == pytest.approx(v01.mean(), rel=1e-6)
    assert est.loc["V01", "lower"] == pytest.approx(lo, rel=1e-5)
    assert est.loc["V01", "upper"] == pytest.approx(hi, rel=1e-5)
    # reference: P(mu >= target) from the t distribution, scipy.stats.t.cdf
    p = stats.t.cdf((v01.mean() - 23) / stats.sem(v01), len(v01) - 1)
    assert est.loc["V01", "p_reached"] == pytest.approx(p, rel=1e-4, abs=1e-9)
    assert np.isnan(est.loc["V09", "se"])
    assert isinstance(est.loc["V01", "target_date"], str)


def test_estimate_unknown_variable_is_one_line_error(plan_dir):
    assert runner.invoke(app, ["results", str(plan_dir), str(ROUND2)]).exit_code == 0
    res = runner.invoke(app, ["estimate", str(plan_dir), "--variable", "yan"])
    assert res.exit_code == 2 and "stored variables" in res.stderr
    bad = runner.invoke(app, ["estimate", str(plan_dir), "--variable", "brix", "--group-by", "row"])
    assert bad.exit_code == 2 and "--group-by must be one of" in bad.stderr


def test_size_from_plan_uses_observed_sd(plan_dir):
    assert runner.invoke(app, ["results", str(plan_dir), str(ROUND2)]).exit_code == 0
    res = runner.invoke(
        app, ["size", "--from-plan", str(plan_dir), "--variable", "brix", "--margin-abs", "0.3", "--json"]
    )
    assert res.exit_code == 0, res.output
    raw = pd.read_csv(ROUND2)
    raw["block"] = raw["point_id"].str[:3]
    g = raw.groupby("block")["brix"]
    # reference: pooled within-block variance sum (n_h - 1) s_h^2 / sum (n_h - 1)
    # (Cochran 1977, §5.9), computed here from the file itself
    pooled = np.sqrt(((g.count() - 1) * g.var().fillna(0)).sum() / (g.count() - 1).sum())
    out = json.loads(res.stdout)
    assert out["sd"] == pytest.approx(pooled, rel=1e-6)
