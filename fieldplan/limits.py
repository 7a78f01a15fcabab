"""Limits on what a plan may ask for, checked before any memory is allocated.

A careless or hostile request (``--per-block 100000000``, ``--per-ha 1e9``, a
million-block Shapefile, a block name of 100,000 characters) must stop with a
one-line error in well under a second, not run for minutes and exhaust memory.
Each check here works from counts known before the work starts: the sizes
asked for, the blocks' total area, the layer's feature count.
"""

from __future__ import annotations

import math
import re

import numpy as np

from fieldplan.errors import DesignError
from fieldplan.words import plural

__all__ = ["DEFAULT_MAX_POINTS", "requested_points", "check_point_budget"]

#: The default of ``--max-points`` (see ``fieldplan.spec.ScaleSpec``).
DEFAULT_MAX_POINTS = 10_000_000


def _strata_count(blocks, strata_by: str | None) -> int:
    if strata_by is not None and strata_by in blocks.columns:
        return int(blocks[strata_by].astype(str).nunique(dropna=False))
    return int(len(blocks))


def requested_points(spec, blocks) -> tuple[float, str]:
    """Upper estimate of the points (and candidates) a stratified design will hold, and its cause.

    Parameters
    ----------
    spec : fieldplan.spec.PlanSpec
    blocks : geopandas.GeoDataFrame
        The blocks in a metric CRS.

    Returns
    -------
    (float, str)
        The count (floats: a request may exceed any integer type) and the option it comes from,
        named as its flag, for the message.
    """
    import shapely

    size = spec.size
    n_blocks = int(len(blocks))
    n_strata = _strata_count(blocks, size.strata_by)
    total_ha = float(np.sum(shapely.area(blocks.geometry.values))) / 10_000.0
    spares = float(getattr(spec.replacements, "spares", 0) or 0) * n_strata
    low = float(getattr(size, "min_per_stratum", 0) or 0) * n_strata
    if size.per_block is not None:
        total, cause = float(size.per_block) * n_blocks, f"--per-block {size.per_block:,} x {plural(n_blocks, 'block')}"
    elif size.per_ha is not None:
        total = float(size.per_ha) * total_ha + n_strata + low
        cause = f"--per-ha {size.per_ha:g} x {total_ha:,.1f} ha"
    elif size.n is not None:
        total, cause = float(size.n), f"--n {size.n:,}"
    elif getattr(size, "target_units", None) is not None:
        per = getattr(spec.clusters, "plants_per_cluster", None) or 1
        total = math.ceil(float(size.target_units) / float(per)) * float(n_strata)
        cause = f"--target-units {size.target_units:,} over {plural(n_strata, 'stratum', 'strata')}"
    else:
        return 0.0, ""
    return total + spares, cause + (f" plus {spares:,.0f} spares" if spares else "")


def check_point_budget(spec, blocks, *, max_points: int) -> None:
    """Refuse a stratified plan asking for more than ``max_points`` points, before drawing any.

    The balanced design also lays a candidate lattice per stratum; a ``--candidates``
    given beyond the limit is refused the same way.

    Raises
    ------
    fieldplan.errors.DesignError
        With the count, its cause and the fix.
    """
    info = spec.design_info
    if not getattr(info, "stratified", True):
        return  # the grid's own check uses its spacing
    total, cause = requested_points(spec, blocks)
    if total > max_points:
        raise DesignError(
            f"the plan would hold about {total:,.0f} points ({cause}), more than the limit of "
            f"{max_points:,}; ask for fewer points (or raise --max-points)"
        )
    candidates = getattr(spec.size, "candidates", None)
    if spec.design == "balanced" and candidates is not None:
        lattice = float(candidates) * _strata_count(blocks, spec.size.strata_by)
        if lattice > max_points:
            raise DesignError(
                f"--candidates {candidates:,} in each of "
                f"{plural(_strata_count(blocks, spec.size.strata_by), 'stratum', 'strata')} is "
                f"{lattice:,.0f} candidate points, more than the limit of {max_points:,}; "
                "use fewer candidates (the default, 200 per point within 2,000-20,000, is enough)"
            )


#: The default of ``--max-blocks``. The largest farm files we plan hold a few thousand
#: blocks (a cooperative's or a district's vineyards: tens of thousands of parcels);
#: 100,000 blocks (a 2.6 MB zipped Shapefile) read in about 8 s and 415 MB, while ten
#: times as many take about ten times that (docs/reliability.md).
DEFAULT_MAX_BLOCKS = 100_000


def feature_count(path, layer: str | None = None) -> int | None:
    """Features in a vector layer from its header or index (no features read); None if unknown."""
    import pyogrio

    try:
        info = pyogrio.read_info(path, layer=layer)
    except Exception:  # noqa: BLE001 - the reader that follows reports unreadable files itself
        return None
    count = int(info.get("features", -1))
    return count if count >= 0 else None


def check_block_count(path, count: int | None, *, max_blocks: int | None) -> None:
    """Refuse a block file holding more than ``max_blocks`` features, before reading it.

    Raises
    ------
    fieldplan.errors.InputError
        Naming the file, the count and the fix.
    """
    from fieldplan.errors import InputError

    if max_blocks is None or count is None or count <= max_blocks:
        return
    raise InputError(
        f"{path}: holds {count:,} features, more than the limit of {max_blocks:,} blocks; plan part of "
        "the file (split it, or pick blocks with --select) or raise --max-blocks"
    )


# --- odd text and structure from input files ------------------------------------------------

#: Longest block id kept. Ids are printed on labels, sheets and in file names; 200
#: characters is far beyond any real parcel code and keeps every output small.
MAX_NAME_CHARS = 200
def load_json(text: str, path):
    """``json.loads`` that reports nesting too deep for Python's parser as a one-line error.

    GeoJSON needs 6 levels (collection, features, geometry, polygons, rings,
    positions); a file nested thousands deep is not a boundary file.
    """
    import json

    from fieldplan.errors import InputError

    try:
        return json.loads(text)
    except RecursionError:
        raise InputError(
            f"{path}: JSON nested too deeply to read (GeoJSON needs 6 levels); this is not a boundary "
            "file: export the blocks again"
        ) from None


def clean_names(names, path, *, max_chars: int = MAX_NAME_CHARS, what: str = "block id") -> None:
    """Refuse block ids with control characters (NUL included) or longer than ``max_chars``.

    Control characters are invisible in most programs and cut file names and
    labels short; a very long id makes every output huge. Both are refused with the
    feature named, rather than changed silently, so the id on the plan is the id in
    the file.
    """
    import pandas as pd

    from fieldplan.errors import InputError

    text = pd.Series(names, dtype=object).astype(str)
    lengths = text.str.len().to_numpy()
    too_long = np.flatnonzero(lengths > max_chars)
    if too_long.size:
        k = int(too_long[0])
        raise InputError(
            f"{path}: feature {k + 1} has a {what} of {int(lengths[k]):,} characters "
            f"(starting {text.iloc[k][:30]!r}); keep ids under {max_chars} characters"
        )
    control = text.str.contains(r"[\x00-\x1f\x7f-\x9f]", regex=True).to_numpy()
    bad = np.flatnonzero(control)
    if bad.size:
        k = int(bad[0])
        shown = text.iloc[k].encode("unicode_escape").decode("ascii")[:60]
        raise InputError(
            f"{path}: feature {k + 1} has a {what} with control characters ('{shown}'); "
            "remove them (tabs, line breaks, NUL) from the id in the file"
        )


_NUL_ESCAPE = re.compile(rb"(?<!\\)(?:\\\\)*\\u0000", re.IGNORECASE)


def check_json_nul(path, raw: bytes | None = None) -> None:
    """Refuse a JSON file whose text holds an escaped NUL (``\\u0000``).

    The vector reader cuts a text value at a NUL without a word, so a block
    ``"B1\\u0000x"`` would silently become ``B1``; refused with its line instead.
    """
    from pathlib import Path

    from fieldplan.errors import InputError

    if raw is None:
        raw = Path(path).read_bytes()
    if b"\\u0000" not in raw and b"\\U0000" not in raw:  # a plain search first: the usual case
        return
    found = _NUL_ESCAPE.search(raw)
    if found is None:
        return
    line = raw.count(b"\n", 0, found.start()) + 1
    raise InputError(
        f"{path}: line {line} holds a NUL character (\\u0000) in a text value, which would cut the "
        "text short; remove it from the file"
    )
