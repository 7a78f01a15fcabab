"""The zones benchmarks on tiny sizes, so they keep running; no timing is asserted here."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("gstools")


def test_efficiency_study_runs_and_zone_strata_gain_where_the_covariate_predicts():
    from benchmarks import zones_validity

    table = zones_validity.run_study((0.9,), farms=2, reps=40, size=32, clhs_steps=300)
    assert list(table["design"]) == zones_validity.DESIGNS
    assert (table["reps"] == 80).all()
    zone = table.set_index("design").loc["zone-stratified"]
    block = table.set_index("design").loc["block-stratified"]
    # reference: Cochran 1977, 5.6 - stratifying on a variable correlated with the target
    # lowers the variance of the stratified mean; with rho = 0.9 zone strata beat block strata
    assert zone["var_srs"] < block["var_srs"]
    assert zone["var_srs"] < 0.6
    assert table["coverage"].between(0.0, 1.0).all()
    section = zones_validity.markdown(table, 1.0)
    assert section.startswith(zones_validity.BEGIN) and section.rstrip().endswith(zones_validity.END)


def test_study_section_is_replaced_not_appended(tmp_path):
    from benchmarks import zones_validity

    doc = tmp_path / "validity.md"
    doc.write_text("# Validity study\n\nOther text.\n", encoding="utf-8")
    zones_validity._insert(doc, f"{zones_validity.BEGIN}\nfirst\n{zones_validity.END}\n")
    zones_validity._insert(doc, f"{zones_validity.BEGIN}\nsecond\n{zones_validity.END}\n")
    text = doc.read_text(encoding="utf-8")
    assert text.count(zones_validity.BEGIN) == 1 and "second" in text and "first" not in text
    assert text.startswith("# Validity study")


def test_speed_study_runs_on_tiny_sizes():
    from benchmarks import zones_bench

    results = zones_bench.study(smoke=True)
    assert [r.study for r in results] == ["zones", "zones", "cLHS"]
    assert all(np.isfinite(r.ratio) and r.ratio > 0 for r in results)
