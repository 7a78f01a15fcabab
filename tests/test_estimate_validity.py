"""Small version of benchmarks/validity.py: the designs' estimates are unbiased
and their intervals cover the true mean about as often as stated."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("gstools")
ROOT = Path(__file__).resolve().parents[1]
_spec = importlib.util.spec_from_file_location("fieldplan_validity", ROOT / "benchmarks" / "validity.py")
validity = importlib.util.module_from_spec(_spec)
sys.modules["fieldplan_validity"] = validity
_spec.loader.exec_module(validity)

REPS = 120


@pytest.fixture(scope="module")
def table():
    surfaces = [validity.gaussian_surface(0.0, size=60), validity.gaussian_surface(20.0, size=60)]
    return validity.run_study(surfaces, reps=REPS, seed=7)


def test_all_designs_unbiased(table):
    # reference: design-unbiasedness of the sample mean under equal inclusion
    # probabilities (Cochran 1977, thm 2.1; ratio estimator approximately, §6.8);
    # 4 Monte-Carlo standard errors allow for chance over the many rows checked.
    assert np.all(np.abs(table["bias"]) <= 4 * table["bias_se"] + 1e-9)


def test_coverage_near_nominal_where_variance_is_design_based(table):
    exact = table[table["design"].isin(["random", "stratified", "clusters"])]
    # reference: nominal 95% t interval (Cochran 1977, §2.11 and §5.4); with 120
    # repetitions the binomial SD is 2%, hence the 89-99.5% band.
    assert exact["coverage"].between(0.89, 0.995).all(), exact


def test_systematic_and_balanced_beat_srs_on_correlated_field(table):
    corr = table[table["surface"].str.startswith("GRF") & table["design"].isin(["grid", "balanced"])]
    # reference: Cochran (1977) §8.8 — systematic samples beat SRS on populations with
    # positive, decreasing serial correlation; Grafström et al. (2012, Biometrics
    # 68:514-520) for the local pivotal method.
    assert (corr["var_ratio_srs"] < 1.0).all(), corr
    # and the SRS formula is then conservative (Wolter 2007, §8.2)
    assert (corr["coverage"] >= 0.93).all(), corr
