"""Sample size: Cochran's n0 and finite population correction, t iteration, Kish deff."""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest
from scipy import stats

from fieldplan.design.samplesize import design_effect, n_clusters, sample_size
from fieldplan.errors import OptionError

# (cv %, relative margin %, confidence, N or None)
RELATIVE_CASES = [
    (25.0, 10.0, 0.95, None),
    (25.0, 10.0, 0.95, 200),
    (40.0, 5.0, 0.90, None),
    (40.0, 5.0, 0.90, 1000),
    (15.0, 10.0, 0.99, 50),
    (60.0, 20.0, 0.80, 30),
    (8.0, 2.5, 0.95, 5000),
]


@pytest.mark.parametrize(("cv", "e", "conf", "N"), RELATIVE_CASES)
def test_relative_z_matches_cochran(cv, e, conf, N):
    z = stats.norm.ppf(1 - (1 - conf) / 2)
    n0 = (z * cv / e) ** 2  # reference: Cochran (1977) ch. 4, n0 = (z S / d)^2 with S/d = CV/e
    n = n0 if N is None else n0 / (1 + n0 / N)  # reference: Cochran (1977) ch. 4, n = n0/(1+n0/N)
    r = sample_size(cv=cv, margin=e, confidence=conf, population=N, distribution="z")
    assert r.n0 == pytest.approx(n0, rel=1e-12)
    assert r.n_fpc == pytest.approx(n, rel=1e-12)
    assert r.n == math.ceil(n)
    assert r.critical_value == pytest.approx(z)


@pytest.mark.parametrize(("sd", "d", "conf", "N"), [(3.0, 0.5, 0.95, None), (3.0, 0.5, 0.95, 60)])
def test_absolute_z_matches_cochran(sd, d, conf, N):
    z = stats.norm.ppf(1 - (1 - conf) / 2)
    n0 = (z * sd / d) ** 2  # reference: Cochran (1977) ch. 4, n0 = (z S / d)^2
    n = n0 if N is None else n0 / (1 + n0 / N)
    r = sample_size(sd=sd, margin=d, confidence=conf, population=N, distribution="z")
    assert r.mode == "absolute"
    assert r.n_fpc == pytest.approx(n, rel=1e-12)
    assert r.n == math.ceil(n)


def test_proportion_form_worked_example():
    # p = 0.5, d = 0.05, 95 %: n0 = 384.16 and, for N = 10 000, n = n0/(1+(n0-1)/N) = 370.
    # reference: Cochran (1977) ch. 4, proportions: n = n0 / (1 + (n0 - 1)/N);
    # the figures 384 and 370 are the widely quoted worked example (from memory).
    r = sample_size(sd=0.5, margin=0.05, population=10_000, distribution="z", fpc="proportion")
    assert r.n0 == pytest.approx(384.146, abs=1e-3)
    assert r.n == 370


@functools.cache
def _t_table(conf: float) -> tuple[np.ndarray, np.ndarray]:
    n = np.arange(2, 20_000)
    return n, stats.t.ppf(1 - (1 - conf) / 2, n - 1)


def _brute_force(ratio: float, conf: float, N: int | None) -> int:
    """Smallest n with t_{n-1} * S / sqrt(n) * sqrt(1 - n/N) <= d (S/d = ratio)."""
    n, t = _t_table(float(conf))
    fpc = 1.0 if N is None else np.clip(1 - n / N, 0, None)
    ok = t * ratio / np.sqrt(n) * np.sqrt(fpc) <= 1.0
    return int(n[np.argmax(ok)])


@pytest.mark.parametrize(("cv", "e", "conf", "N"), RELATIVE_CASES + [(100.0, 50.0, 0.95, None)])
def test_t_iteration_equals_brute_force(cv, e, conf, N):
    # reference: the margin of a mean from a simple random sample without replacement,
    # t_{n-1} * S / sqrt(n) * sqrt(1 - n/N) (Cochran 1977, ch. 2 and 4), searched directly.
    expected = _brute_force(cv / e, conf, N)
    r = sample_size(cv=cv, margin=e, confidence=conf, population=N, distribution="t")
    assert r.n == expected
    assert r.critical_value == pytest.approx(stats.t.ppf(1 - (1 - conf) / 2, expected - 1))


def test_t_iteration_many_random_cases():
    rng = np.random.default_rng(11)
    for _ in range(60):
        ratio = rng.uniform(0.3, 8.0)
        conf = rng.choice([0.8, 0.9, 0.95, 0.99])
        N = None if rng.random() < 0.3 else int(rng.integers(5, 3000))
        r = sample_size(sd=ratio, margin=1.0, confidence=conf, population=N)
        assert r.n == _brute_force(ratio, conf, N)  # reference: direct search as above


def test_design_effect_kish_formula():
    # reference: Kish, Survey Sampling (1965), deff = 1 + (m - 1) rho
    assert design_effect(10, 0.05) == pytest.approx(1.45)
    assert design_effect(1, 0.9) == 1.0
    # reference: clusters = ceil(n * deff / m); 100 * 1.45 / 10 = 14.5 -> 15 (hand computation)
    assert n_clusters(100, units_per_cluster=10, icc=0.05) == 15
    r = sample_size(cv=25, margin=10, distribution="z", units_per_cluster=5, icc=0.1)
    assert r.deff == pytest.approx(1.4)
    assert r.clusters == math.ceil(25 * 1.4 / 5)
    assert r.units_total == r.clusters * 5


def test_design_effect_matches_simulation_and_anova_icc():
    # Beyond the formula (checked against samplics below), the Kish design effect is checked
    # against a direct simulation of the one-way random-effects model, with rho estimated by
    # the ANOVA estimator (MSB - MSW) / (MSB + (m - 1) MSW)
    # (reference: Kish 1965, section 5.4; Donner 1986, Int. Stat. Rev. 54:67-82, from memory).
    rng = np.random.default_rng(5)
    rho, m, k, reps = 0.15, 8, 12, 40_000
    a = rng.normal(0, math.sqrt(rho), size=(reps, k, 1))
    y = a + rng.normal(0, math.sqrt(1 - rho), size=(reps, k, m))
    var_cluster = y.mean(axis=(1, 2)).var()
    var_srs = 1.0 / (k * m)  # independent units, total variance 1
    cm = y.mean(axis=2)
    msb = m * ((cm - cm.mean(axis=1, keepdims=True)) ** 2).sum(axis=1) / (k - 1)
    msw = ((y - cm[..., None]) ** 2).sum(axis=(1, 2)) / (k * (m - 1))
    rho_hat = np.mean((msb - msw) / (msb + (m - 1) * msw))
    assert var_cluster / var_srs == pytest.approx(design_effect(m, rho), rel=0.03)
    assert design_effect(m, float(rho_hat)) == pytest.approx(design_effect(m, rho), rel=0.05)


def test_result_is_json_ready():
    import json

    r = sample_size(cv=30, margin=10, population=400, units_per_cluster=4, icc=0.2)
    d = json.loads(json.dumps(r.to_dict()))
    assert d["n"] == r.n and d["clusters"] == r.clusters
    assert "n0 = (t * CV / e)^2" in r.formula


@pytest.mark.parametrize(
    "kwargs",
    [
        {"margin": 10},
        {"margin": 10, "cv": 20, "sd": 2},
        {"margin": 0, "cv": 20},
        {"margin": 10, "cv": 20, "confidence": 1.5},
        {"margin": 10, "cv": 20, "units_per_cluster": 4},
        {"margin": 10, "cv": 20, "population": 1},
    ],
)
def test_bad_inputs_raise_option_error(kwargs):
    with pytest.raises(OptionError):
        sample_size(**kwargs)


samplics_sampling = pytest.importorskip("samplics.sampling")


@pytest.mark.filterwarnings("ignore::FutureWarning")
@pytest.mark.parametrize(
    ("sd", "d", "N", "conf"), [(3.0, 0.5, 500, 0.95), (12.0, 2.0, 80, 0.9), (1.0, 0.1, 10_000, 0.99)]
)
def test_matches_samplics_mean_wald(sd, d, N, conf):
    from samplics.utils.types import PopParam, SizeMethod

    ref = samplics_sampling.SampleSize(param=PopParam.mean, method=SizeMethod.wald)
    ref.calculate(half_ci=d, sigma=sd, pop_size=N, alpha=1 - conf)
    mine = sample_size(sd=sd, margin=d, population=N, confidence=conf, distribution="z", fpc="proportion")
    # reference: samplics SampleSize (mean, Wald): n = N z^2 s^2 / ((N - 1) d^2 + z^2 s^2),
    # which is n0 / (1 + (n0 - 1)/N)
    assert mine.n == ref.samp_size


@pytest.mark.filterwarnings("ignore::FutureWarning")
@pytest.mark.parametrize(("m", "rho"), [(5, 0.1), (10, 0.05), (2, 0.5), (30, 0.02)])
def test_kish_deff_matches_samplics(m, rho):
    from samplics.utils.types import PopParam, SizeMethod

    ref = samplics_sampling.SampleSize(param=PopParam.mean, method=SizeMethod.wald)
    # reference: samplics SampleSize.deff, Kish's 1 + (m - 1) rho
    assert design_effect(m, rho) == pytest.approx(ref.deff(m, rho))


def _fewest_clusters(ratio, m, icc, conf):
    """Direct search: the fewest k with k >= ceil(ceil((t_{k-1} ratio)^2) deff / m)."""
    deff = 1 + (m - 1) * icc
    tail = 1 - (1 - conf) / 2
    for k in range(2, 10_000):
        n_k = math.ceil((stats.t.ppf(tail, k - 1) * ratio) ** 2 - 1e-9)
        if k >= math.ceil(n_k * deff / m - 1e-9):
            return k
    raise AssertionError("no k found")


@pytest.mark.parametrize(("ratio", "m", "icc"), [(2.5, 10, 0.3), (1.2, 4, 0.5), (4.0, 8, 0.05), (0.9, 20, 0.6)])
def test_clusters_take_degrees_of_freedom_from_clusters(ratio, m, icc):
    r = sample_size(sd=ratio, margin=1.0, units_per_cluster=m, icc=icc)
    # reference: a cluster sample's variance is estimated between its k clusters, so t has k - 1
    # degrees of freedom (Cochran 1977, ch. 9, from memory); direct search over k as above
    assert r.clusters == _fewest_clusters(ratio, m, icc, 0.95)
    k, deff = r.clusters, 1 + (m - 1) * icc
    # the margin is met with t on k - 1 df: t * S * sqrt(deff / (k m)) <= d
    assert stats.t.ppf(0.975, k - 1) * ratio * math.sqrt(deff / (k * m)) <= 1.0 + 1e-9
    assert f"t on {k - 1} degrees of freedom (clusters - 1)" in r.formula


def test_few_large_clusters_need_more_than_unit_degrees_of_freedom_suggest():
    # 10 plants per cluster with a strong ICC: few clusters, so t on clusters - 1 df is much
    # larger than t on units - 1 df would be (reference: scipy.stats.t quantiles)
    r = sample_size(sd=1.2, margin=1.0, units_per_cluster=10, icc=0.6)
    units_df = math.ceil((stats.t.ppf(0.975, 40) * 1.2) ** 2 * r.deff / 10)
    assert r.clusters > units_df
