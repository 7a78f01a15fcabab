"""The column-wise CSV writer gives pandas' bytes, quoting and formula neutralisation included."""

from __future__ import annotations

import numpy as np
import pandas as pd

from fieldplan.write.safe import neutralise_frame
from fieldplan.write.tables import _csv_text

PIECES = ["a", "b,c", 'say "hi"', "=SUM(A1)", "+1", "line\nbreak", "-x", "@y", "cr\rhere", " lead", "",
          "x\n=evil", '"q"', ",", "tab\there", "é, ü", "skip 2 end plant(s), 1 border row(s)"]  # fmt: skip


def test_fast_csv_matches_pandas_on_awkward_text():
    rng = np.random.default_rng(0)
    for _ in range(400):
        n = int(rng.integers(1, 20))
        table = pd.DataFrame(
            {
                "point_id": [f"P{i}" for i in range(n)],
                "instructions": rng.choice(PIECES, n).tolist(),
                "value": rng.normal(size=n),
                "row": rng.integers(0, 5, n),
                "note": pd.Series(rng.choice([*PIECES, None], n).tolist(), dtype=object),
                "label": pd.Series(rng.choice(PIECES, n).tolist(), dtype="string"),
            }
        )
        # reference: pandas DataFrame.to_csv (the csv module's QUOTE_MINIMAL, doubled quotes)
        expected = neutralise_frame(table).to_csv(index=False, lineterminator="\n")
        got = _csv_text(table)
        assert got == expected
