"""Attribute columns of a block file read the same whatever type the reader gave them."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from fieldplan.read import _numeric_column, _text_column


def _general_text(values) -> list:
    # The general rule, value by value: missing -> None, anything else -> its text.
    return [None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v) for v in values]


def test_text_column_of_strings_with_gaps_reads_as_the_general_rule():
    texts = ["Merlot", None, "Chenin, blanc", "", "é"]
    frame = gpd.GeoDataFrame(
        {
            "arrow": pd.Series(texts, dtype="str"),
            "python": pd.Series(texts, dtype="string"),
            "plain": pd.Series(texts, dtype=object),
        },
        geometry=[shapely.Point(0, 0)] * len(texts),
    )
    for column in ("arrow", "python", "plain"):
        got = _text_column(frame, column)
        assert got.dtype == object
        assert (
            got.tolist()
            == _general_text(pd.Series(texts, dtype=object))
            == ["Merlot", None, "Chenin, blanc", "", "é"]
        )


def test_numeric_column_of_numbers_reads_as_parsed_text():
    values = [2.5, np.nan, 3.0, 1.2]
    frame = gpd.GeoDataFrame(
        {
            "floats": values,
            "ints": pd.array([2, None, 3, 1], dtype="Int64"),
            "text": ["2.5", "", "3", " 1.2 "],
        },
        geometry=[shapely.Point(0, 0)] * 4,
    )
    path = Path("blocks.geojson")
    floats = _numeric_column(frame, "floats", "row_spacing_m", path, "block")
    parsed = _numeric_column(frame, "text", "row_spacing_m", path, "block")
    # reference: pandas.to_numeric of the same values written as text
    np.testing.assert_array_equal(floats, pd.to_numeric(pd.Series(["2.5", None, "3", "1.2"])).to_numpy(float))
    np.testing.assert_array_equal(floats, parsed)
    np.testing.assert_array_equal(
        _numeric_column(frame, "ints", "row_spacing_m", path, "block"), [2.0, np.nan, 3.0, 1.0]
    )
