"""The block-count limit on GeoJSON: a quick upper bound, GDAL's count when the bound is over."""

from __future__ import annotations

import json

import pytest

from fieldplan.errors import InputError
from fieldplan.read import read_blocks


def _square(i: int, **properties) -> dict:
    x, y = 18.9 + i * 0.001, -33.86
    ring = [[x, y], [x + 0.0008, y], [x + 0.0008, y + 0.0008], [x, y + 0.0008], [x, y]]
    return {"type": "Feature", "properties": {"block": f"B{i}", **properties},
            "geometry": {"type": "Polygon", "coordinates": [ring]}}  # fmt: skip


def test_geojson_over_the_limit_is_refused(tmp_path):
    path = tmp_path / "blocks.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": [_square(i) for i in range(12)]}))
    with pytest.raises(InputError, match="holds 12 features, more than the limit of 10"):
        read_blocks(path, max_blocks=10)


def test_a_field_named_feature_does_not_refuse_a_file_within_the_limit(tmp_path):
    # Ten blocks with a field named "Feature" (a quote inside a text value is escaped, a field
    # name is not): the quick count says 20, GDAL's count (reference: pyogrio.read_info) says 10.
    path = tmp_path / "blocks.geojson"
    features = [_square(i, Feature="vines") for i in range(10)]
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features}))
    assert path.read_bytes().count(b'"Feature"') > 10
    assert len(read_blocks(path, max_blocks=10)) == 10
