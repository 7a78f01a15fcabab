"""`fieldplan size --from-plan PLAN` on a cluster plan: sized in clusters, per block or per stratum,
with the plan options that realise it."""

from __future__ import annotations

import json
import math
import shutil

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path
from fieldplan.estimate.cluster import icc_anova
from fieldplan.store import load_plan

runner = CliRunner()
M = 4


def _make(tmp, name, *extra):
    out = tmp / name
    res = runner.invoke(
        app,
        ["plan", str(demo_blocks_path()), "--design", "clusters", "--per-block", "6", "--plants-per-cluster",
         str(M), "--seed", "7", "-q", "--out", str(out), *extra],
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    return out


@pytest.fixture(scope="module")
def plans(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("size")
    return {"block": _make(tmp, "by-block"), "variety": _make(tmp, "by-variety", "--strata-by", "variety")}


def _per_plant(plan_dir, path, seed=0):
    pts = load_plan(plan_dir).points
    rng = np.random.default_rng(seed)
    ids = np.repeat(pts["point_id"].to_numpy(), M)
    y = 22 + np.repeat(rng.normal(0, 1.0, len(pts)), M) + rng.normal(0, 1.0, len(ids))
    frame = pd.DataFrame({"point_id": ids, "unit": np.tile(np.arange(1, M + 1), len(pts)), "brix": y.round(2)})
    frame.to_csv(path, index=False)
    return frame.assign(block=np.repeat(pts["block"].to_numpy(), M))


def _copy(src, tmp_path):
    dst = tmp_path / "plan"
    shutil.copytree(src, dst)
    return dst


def test_per_plant_results_size_in_clusters_per_block(plans, tmp_path):
    plan = _copy(plans["block"], tmp_path)
    data = _per_plant(plan, tmp_path / "plants.csv")
    imported = runner.invoke(app, ["results", str(plan), str(tmp_path / "plants.csv"), "-q", "--accept-outliers"])
    assert imported.exit_code == 0, imported.output
    res = runner.invoke(app, ["size", "--from-plan", str(plan), "--variable", "brix", "--margin-abs", "0.5", "--json"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    # reference: one-way ANOVA ICC within blocks (Donner 1986), computed here from the file
    rho = icc_anova(data["brix"], data["point_id"], data["block"])
    assert out["icc"] == pytest.approx(max(rho, 0.0), rel=1e-9)
    assert out["units_per_cluster"] == M and out["per"] == "block"
    k, deff, sd = out["clusters"], 1 + (M - 1) * out["icc"], out["sd"]
    # reference: Kish (1965) deff; the margin holds with t on k - 1 degrees of freedom
    # (clusters, Cochran 1977 ch. 9, from memory) and fails with one cluster fewer
    assert stats.t.ppf(0.975, k - 1) * sd * math.sqrt(deff / (k * M)) <= 0.5 + 1e-9
    assert stats.t.ppf(0.975, k - 2) * sd * math.sqrt(deff / ((k - 1) * M)) > 0.5 * 0.98
    assert out["plan_options"] == (
        f"fieldplan plan BLOCKS --design clusters --per-block {k} --plants-per-cluster {M} --out NEW_PLAN"
    )
    text = runner.invoke(app, ["size", "--from-plan", str(plan), "--variable", "brix", "--margin-abs", "0.5"]).stdout
    assert f"Result: {k} clusters of {M} plants per block" in text and "This is per block" in text


def test_composite_results_size_in_clusters_from_their_spread(plans, tmp_path):
    plan = _copy(plans["block"], tmp_path)
    data = _per_plant(plan, tmp_path / "plants.csv", seed=3)
    comp = data.groupby(["point_id", "block"], as_index=False)["brix"].mean()
    comp[["point_id", "brix"]].to_csv(tmp_path / "composite.csv", index=False)
    # Invented normal values: accept the tail values the outlier check rightly points at.
    imported = runner.invoke(app, ["results", str(plan), str(tmp_path / "composite.csv"), "-q", "--accept-outliers"])
    assert imported.exit_code == 0, imported.output
    res = runner.invoke(app, ["size", "--from-plan", str(plan), "--variable", "brix", "--margin-abs", "0.5", "--json"])
    assert res.exit_code == 0, res.output
    out = json.loads(res.stdout)
    g = comp.groupby("block")["brix"]
    # reference: pooled within-block SD of the composite values (Cochran 1977, §5.9), by hand here
    pooled = math.sqrt(((g.count() - 1) * g.var()).sum() / (g.count() - 1).sum())
    assert out["sd"] == pytest.approx(pooled, rel=1e-6)
    k = out["n"]
    # reference: Cochran (1977) ch. 4 with Student's t on k - 1 df: fewest k with t * S / sqrt(k) <= d
    expect = next(j for j in range(2, 1000) if stats.t.ppf(0.975, j - 1) * pooled / math.sqrt(j) <= 0.5)
    assert k == expect and out["clusters_per_block"] == k and out["clusters"] is None
    assert f"--per-block {k} --plants-per-cluster {M}" in out["plan_options"]


def test_stratified_plan_sizes_per_stratum(plans, tmp_path):
    plan = _copy(plans["variety"], tmp_path)
    _per_plant(plan, tmp_path / "plants.csv", seed=5)
    imported = runner.invoke(app, ["results", str(plan), str(tmp_path / "plants.csv"), "-q", "--accept-outliers"])
    assert imported.exit_code == 0, imported.output
    res = runner.invoke(app, ["size", "--from-plan", str(plan), "--variable", "brix", "--margin-abs", "0.5"])
    assert res.exit_code == 0, res.output
    k = int(res.stdout.split("Result: ")[1].split(" clusters")[0])
    assert "per stratum" in res.stdout and "This is per stratum (variety)" in res.stdout
    # common practice, no source: --target-units T with m plants per cluster gives ceil(T / m) clusters
    assert f"--strata-by variety --target-units {k * M} --plants-per-cluster {M}" in res.stdout


def test_size_keeps_the_old_option_name_hidden():
    args = ["size", "--cv", "25", "--margin", "10", "--icc", "0.1", "--json"]
    new = runner.invoke(app, [*args, "--plants-per-cluster", "5"])
    old = runner.invoke(app, [*args, "--units-per-cluster", "5"])
    # common practice, no source: a renamed option keeps working for one release, same result
    assert new.exit_code == old.exit_code == 0
    assert json.loads(new.stdout) == json.loads(old.stdout)
    assert "--plants-per-cluster" in old.stderr
    helptext = runner.invoke(app, ["size", "--help"], env={"COLUMNS": "200"}).output
    assert "--plants-per-cluster" in helptext and "--units-per-cluster" not in helptext
