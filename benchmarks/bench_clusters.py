"""Random plants from a row model against enumerating every plant.

An estate of about five million plants (vineyard and orchard spacings).
fieldplan lays the row model of every block at once
(:func:`block_row_segments`, as the clusters design does) and draws 30 plants
per block by rank, each block from its own stream (:func:`pick_plants_many`):
work in rows, never in plants. The baseline enumerates every plant position of the block the direct way, one
point per plant on each row line across the block's extent, keeps those inside
the block (``shapely.contains_xy``) and chooses 30 of them with
``Generator.choice``. The baseline is vectorised numpy/shapely, not a Python
loop, so the ratio shows the cost of listing plants, not of the interpreter.
"""

from __future__ import annotations

import numpy as np
import shapely

from benchmarks.baselines import enumerate_and_choose
from benchmarks.timing import Result, fast_vs_slow, peak_memory
from benchmarks.workloads import estate
from fieldplan.design.clusters import block_row_segments, eligible_plants, pick_plants_many
from fieldplan.rng import stream

__all__ = ["enumerate_and_choose", "plant_estate", "study"]

PICKS = 30


def plant_estate(n_blocks: int, *, seed: int):
    """Blocks with close vine/orchard spacings (2–3 m rows, 1–1.6 m plants)."""
    return estate(n_blocks, seed=seed, row_spacing_m=(2.0, 3.0), plant_spacing_m=(1.0, 1.6))


def _each(fn, rows):
    for r in rows:
        yield fn(r)


def study(*, smoke: bool = False, seed: int = 13) -> list[Result]:
    """Time and trace both over the estate; report the speed and memory ratios."""
    blocks = plant_estate(4 if smoke else 70, seed=seed)
    rows = list(blocks.itertuples(index=False))

    geoms = blocks.geometry.values
    layout = {
        "row_spacing_m": blocks["row_spacing_m"].to_numpy(float),
        "plant_spacing_m": blocks["plant_spacing_m"].to_numpy(float),
        "row_bearing_deg": blocks["row_bearing_deg"].to_numpy(float),
    }

    def ours(at=slice(None)):
        seg, owner = block_row_segments(geoms[at], **{k: v[at] for k, v in layout.items()})
        eligible = eligible_plants(seg, groups=owner * (int(seg.parts.max(initial=0)) + 1) + seg.parts)
        rngs = [stream(seed, "clusters", r.block) for r in rows[at]]
        return pick_plants_many(seg, owner, np.full(len(rngs), PICKS), rngs, eligible=eligible)

    def base_block(r):
        return enumerate_and_choose(
            r.geometry,
            row_spacing_m=r.row_spacing_m,
            plant_spacing_m=r.plant_spacing_m,
            row_bearing_deg=r.row_bearing_deg,
            n=PICKS,
            rng=stream(seed, "enumerate", r.block),
        )

    def baseline():
        return list(_each(base_block, rows))

    picks, which = ours()
    plants = int(picks.eligible)
    inside = all(
        bool(shapely.contains_xy(r.geometry, picks.x[which == i], picks.y[which == i]).all())
        for i, r in enumerate(rows)
    )
    inner, runs = (1, 1) if smoke else (10, 5)
    t_ours, t_base = fast_vs_slow(ours, baseline, inner=inner, runs=runs)
    # Peaks while drawing one block at a time, results not kept: what one block's draw needs
    # at most (the plan runs all blocks at once: O(rows of the estate), never O(plants)).
    m_ours = peak_memory(lambda: [None for i in range(len(rows)) for _ in [ours(slice(i, i + 1))]])
    m_base = peak_memory(lambda: [None for _ in _each(base_block, rows)])
    details = {
        "blocks": len(rows),
        "plants": plants,
        "picks_per_block": PICKS,
        "picks_inside_blocks": inside,
        "seconds_fieldplan": round(t_ours, 4),
        "seconds_enumeration": round(t_base, 4),
        "peak_bytes_fieldplan": m_ours,
        "peak_bytes_enumeration": m_base,
        "timing": f"median of {runs} alternating runs; fieldplan timed over {inner} passes per run",
    }
    return [
        Result(
            "clusters",
            "row-model picks vs enumerating plants: speed",
            t_base / t_ours,
            100.0,
            "higher",
            details=details,
        ),
        Result(
            "clusters",
            "row-model picks vs enumerating plants: peak memory (tracemalloc)",
            m_ours / m_base,
            1 / 50,
            "lower",
            unit="of baseline",
            details=details,
        ),
    ]
