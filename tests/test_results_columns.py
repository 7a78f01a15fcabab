"""A points.csv sent back with a measurement added: only the measurement is read as a value."""

from __future__ import annotations

import pandas as pd

from fieldplan.results import read_results


def test_plan_columns_of_points_csv_are_not_measurements(tmp_path):
    # A soil plan's points.csv with the lab's pH added as the last column, as a grower would
    # send it back (common practice, no source): moved_m, spare_rank and visit_order are the
    # plan's own numbers, not results.
    table = pd.DataFrame(
        {
            "point_id": ["P001", "P002", "P003"],
            "block": ["A", "A", "B"],
            "lon": [18.9, 18.91, 18.92],
            "lat": [-33.86, -33.861, -33.862],
            "x": [300000.0, 300010.0, 300020.0],
            "y": [6250000.0, 6250010.0, 6250020.0],
            "depth_cm": ["0-15", "0-15", "0-15"],
            "moved_m": [0.0, 12.5, 0.0],
            "spare_rank": [0, 0, 1],
            "visit_order": [1, 2, 3],
            "ph": [6.1, 5.8, 7.2],
        }
    )
    path = tmp_path / "points_with_ph.csv"
    table.to_csv(path, index=False)
    result = read_results(path, point_ids=["P001", "P002", "P003"])
    assert result.value_columns == ["ph"]
    assert result.data["ph"].tolist() == [6.1, 5.8, 7.2]
