"""Write the invented results files for the demo estate (two rounds of grape sampling).

Run from the repository root: ``python demo_plots/make_results.py``. Values are
drawn from made-up block means, a gentle slope across each block and point
noise, with a seeded generator so reruns give identical files. Round 1 also
carries a few deliberate mistakes (a typed letter, a misplaced decimal point, a
point id the plan does not have) to show the problems report. Nothing here is
a measurement.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from fieldplan.demo import make_demo_plan
from fieldplan.rng import stream

HERE = Path(__file__).resolve().parent
ROUNDS = {1: "2026-02-03", 2: "2026-02-13"}
# Invented block means of soluble solids (°Brix) on the first date.
START_BRIX = {
    "Syrah": 20.8,
    "Chenin blanc": 19.6,
    "Cabernet Sauvignon": 19.2,
    "Pinotage": 21.4,
    "Sauvignon blanc": 20.4,
}
BRIX_PER_DAY = 0.22
PH_START, PH_PER_DAY = 3.32, 0.012


def make_round(plan, round_no: int) -> pd.DataFrame:
    blocks = plan.blocks.set_index("block")
    pts = plan.points[plan.points["block"].str.startswith("V")].copy()
    days = (pd.Timestamp(ROUNDS[round_no]) - pd.Timestamp(ROUNDS[1])).days
    rng = stream(2026, "demo-results", str(round_no))
    variety = pts["block"].map(blocks["variety"])
    x = pd.Series(pts.geometry.x.to_numpy(), index=pts.index)
    cx = x.groupby(pts["block"]).transform("mean")
    slope = ((x - cx) / 200.0).to_numpy()  # riper on the eastern side of each block
    effects = stream(2026, "demo-blocks").normal(0, 0.5, len(blocks))
    block_effect = pts["block"].map(dict(zip(blocks.index, effects, strict=True)))
    brix = (
        variety.map(START_BRIX).to_numpy()
        + block_effect.to_numpy()
        + BRIX_PER_DAY * days
        + slope
        + rng.normal(0.0, 0.8, len(pts))
    )
    ph = PH_START + PH_PER_DAY * days + 0.02 * slope + rng.normal(0.0, 0.04, len(pts))
    out = pd.DataFrame(
        {
            "point_id": pts["point_id"].to_numpy(),
            "date": ROUNDS[round_no],
            "brix": np.round(brix, 1).astype(str),
            "ph": np.round(ph, 2).astype(str),
        }
    )
    if round_no == 1:
        out.loc[4, "brix"] = "2O.4"  # letter O typed for a zero
        out.loc[11, "ph"] = "34"  # decimal point left out
        extra = pd.DataFrame([{"point_id": "V10-001", "date": ROUNDS[1], "brix": "20.9", "ph": "3.35"}])
        out = pd.concat([out, extra], ignore_index=True)
    return out


def main() -> None:
    plan = make_demo_plan()
    for r in ROUNDS:
        make_round(plan, r).to_csv(HERE / f"results_round{r}.csv", index=False, lineterminator="\n")


if __name__ == "__main__":
    main()
