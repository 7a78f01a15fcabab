"""Results tables: every problem listed with its row number, the rest kept."""

from __future__ import annotations

import hashlib

import numpy as np
import pytest

from fieldplan.errors import InputError
from fieldplan.results import format_problems, plausible_range, read_results

PLAN_IDS = ["B01-001", "B01-002", "B01-003", "B02-001"]

BAD = """point_id,Brix,pH,date,notes
B01-001,21.5,3.40,2026-03-01,fine
B01-002,n/a,3.50,2026-03-01,
B01-003,55,3.30,2026-03-01,typo

B01-001,20.0,3.10,2026-03-01,again
X99-001,20.0,3.10,2026-03-01,
,20.0,3.10,2026-03-01,
B02-001,"19,5",12,03/2026,
"""


@pytest.fixture
def bad_file(tmp_path):
    p = tmp_path / "round1.csv"
    p.write_text(BAD, encoding="utf-8")
    return p


def test_problems_listed_with_row_numbers_and_rest_kept(bad_file):
    r = read_results(bad_file, point_ids=PLAN_IDS)
    got = {(int(row), col, prob) for row, col, prob in r.problems[["row", "column", "problem"]].values}
    # Row numbers count the header as row 1, as a spreadsheet shows them.
    # common practice, no source
    assert got == {
        (3, "brix", "not a number"),
        (4, "brix", "out of plausible range"),
        (6, "point_id", "duplicate"),
        (7, "point_id", "unmatched point id"),
        (8, "point_id", "missing point id"),
        (9, "date", "unreadable date"),
        (9, "ph", "out of plausible range"),
    }
    kept = r.data.set_index("point_id")
    assert list(kept.index) == ["B01-001", "B01-002", "B01-003", "B02-001"]
    # the first of two duplicate rows is kept, bad cells are blanked, good cells stay
    assert kept.loc["B01-001", "brix"] == 21.5
    assert np.isnan(kept.loc["B01-002", "brix"]) and kept.loc["B01-002", "ph"] == 3.5
    assert np.isnan(kept.loc["B01-003", "brix"]) and kept.loc["B01-003", "ph"] == 3.3
    # a decimal comma is read as a decimal point (common practice, no source)
    assert kept.loc["B02-001", "brix"] == 19.5
    assert r.value_columns == ["brix", "ph"]
    # reference: hashlib SHA-256 of the raw bytes
    assert r.sha256 == hashlib.sha256(bad_file.read_bytes()).hexdigest()
    text = format_problems(r.problems)
    assert "row 7: X99-001 [point_id] unmatched point id" in text


def test_plausible_ranges():
    # common practice, no source: soluble solids 0-40 °Brix, pH 2-11
    assert plausible_range("Soluble solids") == (0.0, 40.0)
    assert plausible_range("pH") == (2.0, 11.0)
    assert plausible_range("zinc_ppm") is None


def test_per_plant_rows_with_unit_column(tmp_path):
    p = tmp_path / "plants.csv"
    p.write_text("point_id;unit;brix\nB01-001;1;20\nB01-001;2;21\nB01-001;2;22\n", encoding="utf-8")
    r = read_results(p, point_ids=PLAN_IDS)
    # semicolon-separated files are common where the decimal mark is a comma
    # common practice, no source
    assert len(r.data) == 2
    assert r.problems["problem"].tolist() == ["duplicate"]
    assert int(r.problems["row"].iloc[0]) == 4


def test_missing_point_id_column_is_a_clear_error(tmp_path):
    p = tmp_path / "x.csv"
    p.write_text("id_of_vine,brix\nA,20\n", encoding="utf-8")
    with pytest.raises(InputError, match="point_id"):
        read_results(p)


def test_unreadable_file_is_input_error(tmp_path):
    with pytest.raises(InputError, match="cannot read"):
        read_results(tmp_path / "nope.csv")


def test_descriptive_columns_are_not_values(tmp_path):
    p = tmp_path / "filled_template.csv"
    p.write_text(
        "point_id,sample_id,row,plant,pH,P\nB01-001,R1S1-001A,12,40,6.1,23\nB01-002,R1S1-002B,14,9,5.8,19\n",
        encoding="utf-8",
    )
    r = read_results(p, point_ids=PLAN_IDS)
    # sample ids, row and plant numbers describe the sample, they are not measurements
    # common practice, no source
    assert r.value_columns == ["ph", "p"]
    assert r.problems.empty
