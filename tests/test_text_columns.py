"""Text columns built whole: the same strings and column type as Python and pandas give one by one.

reference: Python's ``str.format`` / ``str.zfill`` / ``+`` on each row, and the dtype pandas infers
for a column of Python strings.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from fieldplan.planning import text_columns as tc
from fieldplan.planning.stratum_designs import DEFAULT_INSTRUCTIONS, format_instructions

ROWS = np.array([1, 12, 305, 0, 7_000_000], dtype=np.int64)
NAMES = np.array(["", "part 2 of 2 (east)", "é ü", "{row}", "x" * 40], dtype=object)


@pytest.fixture(params=["arrow", "python"])
def mode(request, monkeypatch):
    if request.param == "python":
        monkeypatch.setattr(tc, "_arrow", lambda: False)
    return request.param


def test_join_text_is_per_row_concatenation(mode):
    got = tc.join_text(["Row ", ROWS, " / ", NAMES, "", pd.Series(NAMES).astype(str), "!"], ROWS.size)
    want = [f"Row {r} / {a}{a}!" for r, a in zip(ROWS.tolist(), NAMES.tolist(), strict=True)]
    assert list(got) == want
    frame = pd.DataFrame({"t": got})
    assert frame["t"].dtype == pd.DataFrame({"t": np.array(want, dtype=object)})["t"].dtype


def test_repeat_zero_padding_and_conversion(mode):
    assert list(tc.repeat_text("general", 3)) == ["general"] * 3
    assert list(tc.repeat_text("", 0)) == []
    assert list(tc.zero_padded(ROWS, 3)) == [str(r).zfill(3) for r in ROWS.tolist()]
    assert list(tc.to_text(ROWS)) == [str(r) for r in ROWS.tolist()]
    assert list(tc.text_column(NAMES)) == NAMES.tolist()
    assert list(tc.join_text(["a", "b"], 2)) == ["ab", "ab"]
    labels = ["", "part 1 of 2 (west)", "part 2 of 2 (east)"]
    index = np.array([0, 2, 2, 1, 0])
    assert list(tc.take_text(labels, index)) == [labels[i] for i in index.tolist()]


def test_instructions_match_str_format(mode):
    table = pd.DataFrame(
        {
            "block": ["B1", "B2", "B3", "B4", "B5"],
            "row": ROWS,
            "plant": ROWS[::-1].copy(),
            "units": ROWS % 3 + 1,
        }
    )
    table["part"] = NAMES
    template = DEFAULT_INSTRUCTIONS + " in {block}{part}."
    got = format_instructions(template, table)
    want = [template.format(**rec) for rec in table.to_dict("records")]
    assert got.dtype == object and got.tolist() == want
    assert format_instructions(template, table.iloc[:0]).tolist() == []


@pytest.mark.parametrize("with_codes", [False, True])
def test_point_ids_number_points_within_their_block(mode, with_codes):
    # reference: pandas groupby().cumcount() and str.zfill, one point at a time
    from fieldplan.planning.plan import _point_ids

    rng = np.random.default_rng(4)
    names = np.array(["B1", "B10", "Zone 3", "é"], dtype=object)
    which = np.concatenate([rng.integers(0, 4, 300), np.full(1200, 1)])
    rng.shuffle(which)
    block = pd.Series(names[which]).astype(str)
    got = _point_ids(block, which if with_codes else None)
    counts = block.groupby(block, sort=False).cumcount() + 1
    width = max(3, len(str(int(counts.max()))))
    assert width == 4
    assert list(got) == [f"{b}-{str(c).zfill(width)}" for b, c in zip(block, counts, strict=True)]


def test_sample_id_bytes_become_the_same_ids(mode):
    # reference: make_sample_ids, the ids as Python strings
    from fieldplan.samples.ids import make_sample_ids, sample_id_bytes

    for n in (0, 1, 40, 31**3 + 2):
        assert list(tc.to_text(sample_id_bytes(n, code="K7MQ"))) == make_sample_ids(n, code="K7MQ").tolist()
