"""Reading a table of laboratory or field results for a plan's points.

A results table has one row per sampled point (or per plant of a cluster when a
``unit`` column numbers the plants), a ``point_id`` column matching the plan,
one or more numeric value columns, and optionally ``date`` and
``units_measured`` (plants pooled into a composite sample).

Nothing is dropped silently and one bad cell never costs the rest of the file:
every problem is listed with its row number (the header is row 1, as a
spreadsheet shows it) and the offending cell is left out while every other
row and cell is kept.
"""

from __future__ import annotations

import csv
import hashlib
import io
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from fieldplan.errors import InputError

__all__ = [
    "PLAUSIBLE_RANGES",
    "PROBLEM_COLUMNS",
    "ResultsTable",
    "plausible_range",
    "parse_results",
    "read_results",
    "format_problems",
    "normalise_column",
    "RESULTS_LAYER",
    "long_results",
    "stored_results",
    "refuse_duplicate",
    "append_round",
]

RESULTS_LAYER = "results"

# Broad plausible ranges for common measurements; a value outside is almost
# always a typo or a unit mix-up (e.g. pH typed into the Brix column).
# common practice, no source
PLAUSIBLE_RANGES: dict[str, tuple[float, float]] = {
    "brix": (0.0, 40.0),
    "ph": (2.0, 11.0),
    "titratable_acidity_g_l": (0.0, 40.0),
    "yan_mg_l": (0.0, 1000.0),
    "berry_weight_g": (0.0, 20.0),
    "moisture_pct": (0.0, 100.0),
    "organic_matter_pct": (0.0, 100.0),
    "nitrate_mg_kg": (0.0, 5000.0),
    "ec_ds_m": (0.0, 50.0),
}

_ALIASES = {
    "brix": "brix",
    "soluble_solids": "brix",
    "soluble_solids_brix": "brix",
    "tss": "brix",
    "total_soluble_solids": "brix",
    "ph": "ph",
    "soil_ph": "ph",
    "juice_ph": "ph",
    "ta": "titratable_acidity_g_l",
    "titratable_acidity": "titratable_acidity_g_l",
    "titratable_acidity_g_l": "titratable_acidity_g_l",
    "yan": "yan_mg_l",
    "yan_mg_l": "yan_mg_l",
    "berry_weight": "berry_weight_g",
    "berry_weight_g": "berry_weight_g",
    "moisture": "moisture_pct",
    "moisture_pct": "moisture_pct",
    "soil_moisture": "moisture_pct",
    "organic_matter": "organic_matter_pct",
    "om_pct": "organic_matter_pct",
    "organic_matter_pct": "organic_matter_pct",
    "nitrate": "nitrate_mg_kg",
    "nitrate_mg_kg": "nitrate_mg_kg",
    "ec": "ec_ds_m",
    "ec_ds_m": "ec_ds_m",
}

KEY_COLUMNS = ("point_id", "unit", "date", "units_measured", "lon", "lat")
# Plan and paperwork columns that may ride along in a results file but are not
# measurements; they are never picked as value columns unless named.
DESCRIPTIVE_COLUMNS = (
    "sample_id", "block", "stratum", "variety", "row", "plant", "units", "depth_cm",
    "round", "x", "y", "lon", "lat", "crew", "visit_order", "purpose", "design",
)  # fmt: skip
PROBLEM_COLUMNS = ["row", "point_id", "column", "problem", "detail"]
_DECIMAL_COMMA = re.compile(r"^\s*[-+]?\d+,\d+\s*$")


def _norm(name: str) -> str:
    n = re.sub(r"[^0-9a-z]+", "_", str(name).strip().lower()).strip("_")
    return {"point": "point_id", "pointid": "point_id", "units": "units_measured"}.get(n, n)


def normalise_column(name: str) -> str:
    """Column name as fieldplan stores it: lower_snake_case, ``point`` -> ``point_id``."""
    return _norm(name)


def plausible_range(column: str) -> tuple[float, float] | None:
    """Plausible (low, high) for a value column name, or None if unknown."""
    key = _ALIASES.get(_norm(column))
    return PLAUSIBLE_RANGES.get(key) if key else None


@dataclass(frozen=True)
class ResultsTable:
    """A parsed results table.

    Attributes
    ----------
    data : pandas.DataFrame
        Kept rows: ``row`` (file row number), ``point_id``, the optional key
        columns present, and one float column per value column (NaN where the
        cell was empty or rejected).
    value_columns : list of str
        Names of the numeric value columns (normalised to lower_snake_case).
    problems : pandas.DataFrame
        ``row, point_id, column, problem, detail``, one line per problem.
    source : str
        File name or label.
    sha256 : str
        Digest of the raw bytes ('' for an in-memory table).
    """

    data: pd.DataFrame
    value_columns: list[str]
    problems: pd.DataFrame = field(repr=False)
    source: str = "<table>"
    sha256: str = ""


def _to_number(raw: pd.Series) -> pd.Series:
    text = raw.astype("string").str.strip()
    text = text.mask(text.str.match(_DECIMAL_COMMA).fillna(False), text.str.replace(",", "."))
    return pd.to_numeric(text, errors="coerce").astype(float)


def _problems(rows, ids, column: str, problem: str, details) -> pd.DataFrame:
    rows = np.asarray(rows)
    return pd.DataFrame(
        {
            "row": rows.astype(int),
            "point_id": np.asarray(ids, dtype=object),
            "column": column,
            "problem": problem,
            "detail": np.broadcast_to(np.asarray(details, dtype=object), rows.shape),
        }
    )


def parse_results(
    frame: pd.DataFrame,
    *,
    point_ids: Iterable[str] | None = None,
    value_columns: Iterable[str] | None = None,
    ranges: Mapping[str, tuple[float, float]] | None = None,
    source: str = "<table>",
    sha256: str = "",
) -> ResultsTable:
    """Check a results table and keep everything that can be kept.

    Parameters
    ----------
    frame : pandas.DataFrame
        Raw table, cells as text or numbers; row ``i`` (0-based) is reported
        as row ``i + 2``.
    point_ids : iterable of str, optional, keyword-only
        The plan's point ids; rows with other ids are reported and left out.
    value_columns : iterable of str, optional, keyword-only
        Value columns to read. By default every column other than the key
        columns in which most filled cells are numbers.
    ranges : mapping, optional, keyword-only
        Plausible ``(low, high)`` per value column, overriding
        :data:`PLAUSIBLE_RANGES`.
    source, sha256 : str, keyword-only
        Recorded on the result.

    Returns
    -------
    ResultsTable
    """
    raw = frame.copy()
    raw.columns = [_norm(c) for c in raw.columns]
    if raw.columns.duplicated().any():
        dup = sorted(set(raw.columns[raw.columns.duplicated()]))
        raise InputError(f"{source}: repeated column name(s) {dup}; rename them so each is unique")
    if "point_id" not in raw.columns:
        raise InputError(
            f"{source}: no point_id column (found {list(raw.columns)}); "
            "add a column named point_id holding the plan's point ids"
        )
    rows = np.arange(len(raw)) + 2
    ids = raw["point_id"].astype("string").str.strip().fillna("")
    found: list[pd.DataFrame] = []
    others = [c for c in raw.columns if c not in KEY_COLUMNS]
    if value_columns is None:
        cols = []
        for c in others:
            if c in DESCRIPTIVE_COLUMNS:
                continue
            text = raw[c].astype("string").str.strip().fillna("")
            filled = text != ""
            if filled.sum() and _to_number(raw[c])[filled.to_numpy()].notna().mean() >= 0.5:
                cols.append(c)
    else:
        cols = [_norm(c) for c in value_columns]
        absent = [c for c in cols if c not in raw.columns]
        if absent:
            raise InputError(f"{source}: value column(s) {absent} not found; columns are {list(raw.columns)}")
    if not cols:
        raise InputError(f"{source}: no numeric value column found; columns are {list(raw.columns)}")
    # Blank lines keep their place so row numbers match the file; they are not problems.
    cells = raw.astype("string").apply(lambda s: s.str.strip()).fillna("")
    keep = (cells != "").any(axis=1).to_numpy()

    no_id = keep & (ids == "").to_numpy()
    if no_id.any():
        found.append(_problems(rows[no_id], ids[no_id], "point_id", "missing point id", ""))
        keep &= ~no_id
    if point_ids is not None:
        known = set(map(str, point_ids))
        unmatched = keep & ~ids.isin(known).to_numpy()
        if unmatched.any():
            found.append(
                _problems(
                    rows[unmatched],
                    ids[unmatched],
                    "point_id",
                    "unmatched point id",
                    "not a point of this plan; row left out",
                )
            )
            keep &= ~unmatched
    key = ["point_id"] + (["unit"] if "unit" in raw.columns else [])
    keyframe = pd.DataFrame({"point_id": ids})
    if "unit" in raw.columns:
        keyframe["unit"] = raw["unit"].astype("string").str.strip().fillna("")
    dup = keep & keyframe.duplicated(subset=key, keep=False).to_numpy()
    if dup.any():
        first = keyframe[dup].reset_index().groupby(key)["index"].transform("min").to_numpy()
        later = np.zeros(len(raw), dtype=bool)
        idx = np.flatnonzero(dup)
        later[idx[idx != first]] = True
        found.append(
            _problems(
                rows[later],
                ids[later],
                "point_id",
                "duplicate",
                [f"same point as row {r}; first kept" for r in first[idx != first] + 2],
            )
        )
        keep &= ~later

    out = pd.DataFrame({"row": rows, "point_id": ids.astype(object)})
    if "unit" in raw.columns:
        out["unit"] = keyframe["unit"].astype(object)
    if "date" in raw.columns:
        text = raw["date"].astype("string").str.strip().fillna("")
        dates = pd.to_datetime(text.where(text != ""), errors="coerce", format="ISO8601")
        bad = keep & (text != "").to_numpy() & dates.isna().to_numpy()
        if bad.any():
            found.append(_problems(rows[bad], ids[bad], "date", "unreadable date", "use YYYY-MM-DD"))
        out["date"] = dates
    if "units_measured" in raw.columns:
        units = _to_number(raw["units_measured"])
        text = raw["units_measured"].astype("string").str.strip().fillna("")
        bad = keep & (text != "").to_numpy() & ~(units > 0).to_numpy()
        if bad.any():
            found.append(
                _problems(
                    rows[bad],
                    ids[bad],
                    "units_measured",
                    "not a positive count",
                    text[bad].to_numpy(dtype=object),
                )
            )
        out["units_measured"] = units.where(units > 0)

    limits = dict(ranges or {})
    for c in cols:
        text = raw[c].astype("string").str.strip().fillna("")
        num = _to_number(raw[c])
        nonnum = keep & (text != "").to_numpy() & num.isna().to_numpy()
        if nonnum.any():
            found.append(
                _problems(
                    rows[nonnum],
                    ids[nonnum],
                    c,
                    "not a number",
                    [repr(t) for t in text[nonnum]],
                )
            )
        lim = limits.get(c) or plausible_range(c)
        if lim is not None:
            lo, hi = lim
            off = keep & num.notna().to_numpy() & ~num.between(lo, hi).to_numpy()
            if off.any():
                found.append(
                    _problems(
                        rows[off],
                        ids[off],
                        c,
                        "out of plausible range",
                        [f"{v:g} outside {lo:g}–{hi:g}; cell left out" for v in num[off]],
                    )
                )
                num = num.mask(off)
        out[c] = num.to_numpy(dtype=float)
    problems = (
        pd.concat(found, ignore_index=True).sort_values(["row", "column"], kind="stable")
        if found
        else pd.DataFrame(columns=PROBLEM_COLUMNS)
    )
    return ResultsTable(
        data=out[keep].reset_index(drop=True),
        value_columns=cols,
        problems=problems.reset_index(drop=True),
        source=source,
        sha256=sha256,
    )


def read_results(
    path: str | Path,
    *,
    point_ids: Iterable[str] | None = None,
    value_columns: Iterable[str] | None = None,
    ranges: Mapping[str, tuple[float, float]] | None = None,
) -> ResultsTable:
    """Read a CSV (comma, semicolon or tab separated) results file.

    See :func:`parse_results` for the checks. Raises
    :class:`~fieldplan.errors.InputError` if the file cannot be read at all.
    """
    p = Path(path)
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise InputError(f"{p}: cannot read results file ({exc.strerror}); check the path") from exc
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = data.decode("latin-1")
    try:
        frame = pd.read_csv(
            io.StringIO(text),
            sep=None,
            engine="python",
            dtype=str,
            keep_default_na=False,
            skip_blank_lines=False,
        )
    except (pd.errors.ParserError, pd.errors.EmptyDataError, csv.Error) as exc:
        raise InputError(f"{p}: not a readable CSV table ({exc}); save it as CSV with a header row") from exc
    return parse_results(
        frame,
        point_ids=point_ids,
        value_columns=value_columns,
        ranges=ranges,
        source=str(p),
        sha256=hashlib.sha256(data).hexdigest(),
    )


def format_problems(problems: pd.DataFrame, *, limit: int = 50) -> str:
    """Plain-text list of problems, one per line, at most ``limit`` lines."""
    if problems.empty:
        return "no problems found"
    lines = [
        f"row {int(r.row)}: {r.point_id or '-'} [{r.column}] {r.problem}"
        + (f" ({r.detail})" if r.detail else "")
        for r in problems.head(limit).itertuples(index=False)
    ]
    if len(problems) > limit:
        lines.append(f"... and {len(problems) - limit} more")
    return "\n".join(lines)


def long_results(table: ResultsTable, *, round_no: int, imported_utc: str) -> pd.DataFrame:
    """One row per point (and unit) and variable, ready to store as a round.

    Columns: ``round, imported_utc, source, sha256, row, point_id, unit, date,
    units_measured, variable, value``. Empty or rejected cells are not stored.
    """
    d = table.data
    base = pd.DataFrame(
        {
            "row": d["row"].astype("int64"),
            "point_id": d["point_id"].astype(str),
            "unit": d["unit"].astype(str) if "unit" in d else "",
            "date": d["date"].dt.strftime("%Y-%m-%d").fillna("") if "date" in d else "",
            "units_measured": d["units_measured"] if "units_measured" in d else np.nan,
        }
    )
    parts = [base.assign(variable=c, value=d[c].to_numpy(dtype=float)) for c in table.value_columns]
    out = pd.concat(parts, ignore_index=True)
    out = out[np.isfinite(out["value"].to_numpy(dtype=float))]
    out.insert(0, "sha256", table.sha256)
    out.insert(0, "source", Path(table.source).name)
    out.insert(0, "imported_utc", imported_utc)
    out.insert(0, "round", int(round_no))
    return out.reset_index(drop=True)


def stored_results(layers: Mapping[str, pd.DataFrame]) -> pd.DataFrame:
    """The ``results`` layer of a loaded plan (``Plan.layers``), or an empty frame."""
    frame = layers.get(RESULTS_LAYER)
    if frame is None or len(frame) == 0:
        return pd.DataFrame(
            columns=[
                "round", "imported_utc", "source", "sha256", "row", "point_id", "unit",
                "date", "units_measured", "variable", "value",
            ]
        )  # fmt: skip
    frame = pd.DataFrame(frame).drop(columns="geometry", errors="ignore")
    frame["round"] = frame["round"].astype("int64")
    frame["value"] = frame["value"].astype(float)
    for c in ("unit", "date", "point_id", "source", "sha256"):
        frame[c] = frame[c].fillna("").astype(str)
    return frame


def refuse_duplicate(table: ResultsTable, existing: pd.DataFrame, *, allow_duplicate: bool = False) -> None:
    """Raise if a file with the same SHA-256 as ``table`` was stored before.

    Callers run this before reporting the file's problems, so a refused import
    says only that it was refused.

    Raises
    ------
    InputError
        If ``existing`` holds a round with ``table.sha256`` and ``allow_duplicate`` is false.
    """
    if not table.sha256 or allow_duplicate or "sha256" not in existing.columns:
        return
    same = existing["sha256"] == table.sha256
    if same.any():
        prev = existing.loc[same, "round"].iloc[0]
        raise InputError(
            f"{table.source}: this exact file was already imported as round {int(prev)}; "
            "use --allow-duplicate to import it again as a new round"
        )


def append_round(
    plan_dir: str | Path,
    table: ResultsTable,
    *,
    existing: pd.DataFrame,
    imported_utc: str,
    allow_duplicate: bool = False,
) -> int:
    """Store ``table`` as the next round in ``plan.gpkg`` (layer ``results``).

    Earlier rounds are kept as they are; the GeoPackage is rewritten through a
    copy beside it and swapped in, so an interrupted import leaves the old file.
    Returns the new round number.

    Raises
    ------
    InputError
        If a file with the same SHA-256 was imported before and
        ``allow_duplicate`` is false, or nothing numeric is left to store.
    """
    import os
    import shutil

    from fieldplan.write.gpkg import GPKG_NAME, write_layer

    refuse_duplicate(table, existing, allow_duplicate=allow_duplicate)
    round_no = int(existing["round"].max()) + 1 if len(existing) else 1
    new = long_results(table, round_no=round_no, imported_utc=imported_utc)
    if new.empty:
        raise InputError(f"{table.source}: no usable values to store; see the problems listed")
    frame = pd.concat([existing, new], ignore_index=True) if len(existing) else new
    path = Path(plan_dir) / GPKG_NAME
    tmp = path.with_name(f".results-tmp-{path.name}")
    shutil.copy2(path, tmp)
    try:
        write_layer(tmp, RESULTS_LAYER, frame)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return round_no
