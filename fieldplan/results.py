"""Reading a table of laboratory or field results for a plan's points.

A results table has one row per sampled point (or per plant of a cluster when a
``unit`` column numbers the plants), a ``point_id`` column matching the plan
(or a ``sample_id`` column holding the ids printed on the labels), one or more
numeric value columns, and optionally ``date`` and ``units_measured`` (plants
pooled into a composite sample).

Files come as CSV (comma, semicolon or tab separated; UTF-8, UTF-16 or
UTF-32 with a byte order mark, else Windows-1252) or as Excel workbooks
(``.xlsx``, first sheet or a named one). Dates may be ISO (2026-03-01),
day first (01/03/2026) or month first (03/01/2026); a file whose dates could be
either is refused until ``date_format`` says which.

Reading and checking (:func:`read_table`, :func:`parse_results`,
:func:`outlier_suspects`) never write; :func:`append_round` and
:func:`remove_round` are the only functions that change ``plan.gpkg``.

Nothing is dropped silently and one bad cell never costs the rest of the file:
every problem is listed with its row number (the header is row 1, as a
spreadsheet shows it) and the offending cell is left out while every other
row and cell is kept.
"""

from __future__ import annotations

import codecs
import csv
import hashlib
import io
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

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
    "RawTable",
    "read_table",
    "parse_dates",
    "modified_z",
    "outlier_suspects",
    "format_outliers",
    "sample_id_map",
    "remove_round",
    "REMOVED_LAYER",
    "DATE_FORMATS",
    "next_round",
    "PreparedImport",
    "prepare_import",
    "active_point_ids",
]

RESULTS_LAYER = "results"
#: Rounds taken out with ``--remove-round`` are moved here, never deleted.
REMOVED_LAYER = "results_removed"
#: ``--date-format`` choices: ISO year-month-day, day first, month first.
DATE_FORMATS = ("iso", "dmy", "mdy")
#: Iglewicz & Hoaglin (1993): |M| > 3.5 marks a potential outlier.
OUTLIER_Z = 3.5
#: Fewest values of a variable in a round before the outlier check runs
#: (a median and MAD of three or four values say little; common practice, no source).
OUTLIER_MIN_VALUES = 5

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
# Other names lab and field exports give the sampling date; read as ``date``.
DATE_ALIASES = (
    "sample_date", "sampling_date", "date_sampled", "date_of_sampling", "sampled", "sampled_on",
    "collection_date", "date_collected",
)  # fmt: skip
# Cells in these columns are never joined when repairing unquoted decimal commas.
_NOT_DECIMAL = frozenset(
    {"point_id", "sample_id", "unit", "date", "block", "stratum", "variety", "row", "plant", "round", "crew"}
)
# Plan and paperwork columns that may ride along in a results file but are not
# measurements; they are never picked as value columns unless named.
# Columns the plan itself writes to points.csv (and crews add): a points.csv sent back with
# measurements added must not have these read as measurements.
DESCRIPTIVE_COLUMNS = (
    "sample_id", "block", "stratum", "variety", "row", "plant", "units", "depth_cm",
    "round", "x", "y", "lon", "lat", "crew", "visit_order", "purpose", "design",
    "moved_m", "spare_rank", "part", "status", "per_sample", "instructions", "crs",
)  # fmt: skip
PROBLEM_COLUMNS = ["row", "point_id", "column", "problem", "detail"]
_DECIMAL_COMMA = re.compile(r"^\s*[-+]?\d+,\d+\s*$")
_INT_PART = re.compile(r"^\s*[-+]?\d+$")
_FRACTION = re.compile(r"^\d+\s*$")
_ISO_DATE = re.compile(r"^\s*(\d{4})[-/.](\d{1,2})[-/.](\d{1,2})(?:[T ]\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?Z?)?\s*$")
_OTHER_DATE = re.compile(r"^\s*(\d{1,2})[-/.](\d{1,2})[-/.](\d{4})(?:[T ]\d{1,2}:\d{2}(?::\d{2})?)?\s*$")


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
    notes : tuple of str
        How the file was read where that is worth knowing (encoding, decimal
        commas, date order, sample ids, columns ignored).
    """

    data: pd.DataFrame
    value_columns: list[str]
    problems: pd.DataFrame = field(repr=False)
    source: str = "<table>"
    sha256: str = ""
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class RawTable:
    """A results file as text cells, before any check.

    ``frame`` holds one string column per header cell (the header as written),
    ``first_row`` is the file or sheet row number of the frame's first row.
    """

    frame: pd.DataFrame
    source: str
    sha256: str
    notes: tuple[str, ...] = ()
    first_row: int = 2


def _decode(data: bytes, source: str) -> tuple[str, list[str]]:
    """Text of a CSV file: the byte order mark decides, else UTF-8, else Windows-1252."""
    boms = (
        (codecs.BOM_UTF32_LE, "utf-32", "UTF-32"),
        (codecs.BOM_UTF32_BE, "utf-32", "UTF-32"),
        (codecs.BOM_UTF8, "utf-8-sig", None),
        (codecs.BOM_UTF16_LE, "utf-16", "UTF-16"),
        (codecs.BOM_UTF16_BE, "utf-16", "UTF-16"),
    )
    for bom, codec, name in boms:
        if data.startswith(bom):
            try:
                return data.decode(codec), [f"read as {name} (byte order mark)"] if name else []
            except UnicodeDecodeError:
                raise InputError(
                    f"{source}: starts with a {name or 'UTF-8'} byte order mark but is not valid {name or 'UTF-8'}; "
                    "save it again as CSV (UTF-8)"
                ) from None
    head = data[:4000]
    if head.count(b"\x00") > len(head) // 4:
        # UTF-16 without a byte order mark: ASCII text leaves every other byte zero.
        even, odd = head[0::2].count(b"\x00"), head[1::2].count(b"\x00")
        codec = "utf-16-le" if odd > even else "utf-16-be"
        try:
            return data.decode(codec), [f"read as {codec.upper()} (no byte order mark)"]
        except UnicodeDecodeError:
            raise InputError(f"{source}: binary file, not a CSV table; save the results as CSV or .xlsx") from None
    try:
        return data.decode("utf-8"), []
    except UnicodeDecodeError:
        try:
            return data.decode("cp1252"), ["not UTF-8: read as Windows-1252"]
        except UnicodeDecodeError:
            return data.decode("latin-1"), ["not UTF-8: read as Latin-1"]


def _delimiter(text: str) -> str:
    """Separator of a CSV text from its header line: tab, semicolon or comma."""
    header = next((line for line in text.splitlines() if line.strip()), "")
    counts = {d: len(next(csv.reader([header], delimiter=d), [])) - 1 for d in ("\t", ";", ",", "|")}
    best = max(counts, key=lambda d: counts[d])
    return best if counts[best] > 0 else ","


def _join_decimal_commas(cells: list[str], header: list[str]) -> list[list[str]]:
    """Ways to read a comma-split row as ``len(header)`` cells by re-joining decimal commas.

    A pair ``23`` ``1`` may be one number ``23,1`` when the row has too many
    cells; at most two readings are returned (two means ambiguous).
    """
    want = len(header)
    names = [_norm(h) for h in header]
    found: list[list[str]] = []

    def walk(i: int, out: list[str]) -> None:
        if len(found) > 1 or len(out) > want:
            return
        if i == len(cells):
            if len(out) == want:
                found.append(list(out))
            return
        # More cells left than columns to fill, even joining every pair: give up early.
        if (len(cells) - i) > 2 * (want - len(out)):
            return
        walk(i + 1, [*out, cells[i]])
        col = len(out)
        if (
            i + 1 < len(cells)
            and col < want
            and names[col] not in _NOT_DECIMAL
            and _INT_PART.match(cells[i])
            and _FRACTION.match(cells[i + 1])
        ):
            walk(i + 2, [*out, f"{cells[i]},{cells[i + 1]}"])

    walk(0, [])
    return found


def _csv_frame(text: str, source: str) -> tuple[pd.DataFrame, list[str], list[str], int]:
    notes: list[str] = []
    skipped = 0
    # Spreadsheets writing CSV for another locale may put the separator on a first line "sep=;".
    hint = re.match(r"^sep=(.)\r?\n", text)
    if hint:
        sep, text, skipped = hint.group(1), text[hint.end() :], 1
    else:
        sep = _delimiter(text)
    try:
        rows = list(csv.reader(io.StringIO(text, newline=""), delimiter=sep))
    except csv.Error as exc:
        raise InputError(f"{source}: not a readable CSV table ({exc}); save it as CSV with a header row") from None
    while rows and not any(c.strip() for c in rows[0]):
        rows.pop(0)
        skipped += 1
    if not rows:
        raise InputError(f"{source}: the file is empty; save the results as CSV with a header row")
    header = [c.strip() for c in rows[0]]
    while header and not header[-1]:
        header.pop()
    width = len(header)
    body: list[list[str]] = []
    joined = 0
    for k, row in enumerate(rows[1:]):
        cells = list(row)
        while len(cells) > width and not cells[-1].strip():
            cells.pop()
        if len(cells) > width:
            readings = _join_decimal_commas(cells, header) if sep == "," else []
            if len(readings) != 1:
                why = (
                    "its decimal commas can be read more than one way"
                    if readings
                    else f"it has {len(cells)} cells and the header {width}"
                )
                raise InputError(
                    f"{source}: row {k + 2}: {why}; put values with a decimal comma in quotes, "
                    "or save the file with ';' as separator"
                )
            cells = readings[0]
            joined += 1
        body.append(cells + [""] * (width - len(cells)))
    if joined:
        notes.append(
            f"comma-separated with unquoted decimal commas in {joined} row(s): read e.g. 23,1 as 23.1 "
            "(quote such values or use ';' as separator to be sure)"
        )
    return pd.DataFrame(body, columns=range(width), dtype=object), notes, header, 2 + skipped


def _xlsx_frame(data: bytes, source: str, sheet: str | None) -> tuple[pd.DataFrame, list[str], list[str], int]:
    try:
        import openpyxl
    except ImportError:  # pragma: no cover - a main dependency
        raise InputError(f"{source}: reading .xlsx needs openpyxl (pip install openpyxl)") from None
    try:
        book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # noqa: BLE001 - openpyxl raises many kinds for a damaged file
        raise InputError(f"{source}: not a readable .xlsx workbook ({exc}); save it again from the spreadsheet") from None
    names = book.sheetnames
    if sheet is None:
        ws = book[names[0]]
    elif sheet in names:
        ws = book[sheet]
    else:
        raise InputError(f"{source}: no sheet {sheet!r}; the sheets are {', '.join(map(repr, names))}")
    rows = []
    for values in ws.iter_rows(values_only=True):
        rows.append(["" if v is None else _cell_text(v) for v in values])
    book.close()
    # The header is the first row naming point_id or sample_id (lab exports often put a title
    # above it), else the first non-empty row.
    start = next(
        (i for i, r in enumerate(rows[:30]) if {"point_id", "sample_id"} & {_norm(c) for c in r if c}),
        next((i for i, r in enumerate(rows) if any(c.strip() for c in r)), None),
    )
    if start is None:
        raise InputError(f"{source}: sheet {ws.title!r} is empty; give the sheet holding the results with --sheet")
    header = [c.strip() for c in rows[start]]
    while header and not header[-1]:
        header.pop()
    width = len(header)
    body = [(r + [""] * width)[:width] for r in rows[start + 1 :]]
    notes = [f"sheet {ws.title!r}" + (f" of {len(names)}" if len(names) > 1 else "")]
    if start:
        notes.append(f"header on sheet row {start + 1}")
    return pd.DataFrame(body, columns=range(width), dtype=object), notes, header, start + 2


def _cell_text(value) -> str:
    import datetime as dt

    if isinstance(value, dt.datetime):
        return value.strftime("%Y-%m-%d") if value.time() == dt.time(0) else value.isoformat(timespec="minutes")
    if isinstance(value, dt.date):
        return value.isoformat()
    if isinstance(value, float):
        return repr(value) if not value.is_integer() else str(int(value))
    return str(value)


def read_table(path: str | Path, *, sheet: str | None = None) -> RawTable:
    """Read a results file as text cells, checking its header.

    Parameters
    ----------
    path : path
        CSV (any of the encodings and separators above) or ``.xlsx``.
    sheet : str, optional, keyword-only
        Workbook sheet to read (default the first).

    Raises
    ------
    InputError
        The file cannot be read, a column name appears twice, or a column
        holds values but has no name.
    """
    p = Path(path)
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise InputError(f"{p}: cannot read results file ({exc.strerror}); check the path") from exc
    source = str(p)
    if data.startswith(b"\xd0\xcf\x11\xe0"):
        raise InputError(f"{source}: an old Excel (.xls) workbook; save it as .xlsx or CSV")
    if data.startswith(b"PK\x03\x04") or p.suffix.lower() in (".xlsx", ".xlsm"):
        frame, notes, header, first_row = _xlsx_frame(data, source, sheet)
    else:
        if sheet is not None:
            raise InputError(f"{source}: --sheet applies to .xlsx workbooks; this is a text file")
        text, notes = _decode(data, source)
        frame, more, header, first_row = _csv_frame(text, source)
        notes += more
    seen: dict[str, int] = {}
    for i, name in enumerate(header):
        if not name:
            if frame[i].astype(str).str.strip().ne("").any():
                raise InputError(f"{source}: column {i + 1} holds values but has no name; give it a header")
            continue
        if name in seen:
            raise InputError(
                f"{source}: column {name!r} appears twice (columns {seen[name] + 1} and {i + 1}); "
                "keep one, or rename them so each measurement has its own name"
            )
        seen[name] = i
    keep = [i for i, name in enumerate(header) if name]
    frame = frame[keep]
    frame.columns = [header[i] for i in keep]
    return RawTable(frame, source, hashlib.sha256(data).hexdigest(), tuple(notes), first_row)


def parse_dates(text: pd.Series, *, date_format: str | None = None, source: str = "<table>") -> tuple[pd.Series, str]:
    """Dates from text cells: ISO, day first or month first.

    Parameters
    ----------
    text : pandas.Series of str
        Stripped cells ('' for empty).
    date_format : {"iso", "dmy", "mdy"} or a strftime pattern, optional, keyword-only
        How to read dates that are not ISO. By default the order is read off
        the file: a first part above 12 means day first, a second part above 12
        month first; if every date fits both, the file is refused (a wrong
        guess shifts a date by months without any error).

    Returns
    -------
    dates : pandas.Series of datetime64 (NaT where unreadable or empty)
    order : str
        ``"iso"``, ``"dmy"``, ``"mdy"``, the pattern given, or ``""`` when no date was read.
    """
    t = text.astype("string").fillna("").str.strip()
    if date_format is not None and "%" in date_format:
        return pd.to_datetime(t.where(t != ""), format=date_format, errors="coerce"), date_format
    if date_format is not None and date_format not in DATE_FORMATS:
        raise InputError(
            f"--date-format must be one of {', '.join(DATE_FORMATS)} or a pattern such as %d.%m.%Y; got {date_format!r}"
        )
    iso = t.str.extract(_ISO_DATE)
    other = t.str.extract(_OTHER_DATE)
    dates = pd.Series(pd.NaT, index=t.index, dtype="datetime64[ns]")
    has_iso = iso[0].notna()
    if has_iso.any():
        dates[has_iso] = pd.to_datetime(
            {"year": iso.loc[has_iso, 0].astype(int), "month": iso.loc[has_iso, 1].astype(int),
             "day": iso.loc[has_iso, 2].astype(int)},
            errors="coerce",
        )  # fmt: skip
    has_other = other[0].notna()
    order = "iso" if has_iso.any() else ""
    if has_other.any():
        a = other.loc[has_other, 0].astype(int)
        b = other.loc[has_other, 1].astype(int)
        if date_format in ("dmy", "mdy"):
            order = date_format
        elif date_format == "iso":
            order = "iso"
        elif (a > 12).any() and (b > 12).any():
            raise InputError(
                f"{source}: dates are written both day first and month first (e.g. "
                f"{t[has_other][a > 12].iloc[0]!r} and {t[has_other][b > 12].iloc[0]!r}); correct the column"
            )
        elif (a > 12).any():
            order = "dmy"
        elif (b > 12).any():
            order = "mdy"
        elif (a == b).all():
            order = "dmy"
        else:
            example = t[has_other][a != b].iloc[0]
            raise InputError(
                f"{source}: dates like {example!r} could be day first or month first; "
                "give --date-format dmy (day/month/year) or --date-format mdy (month/day/year)"
            )
        if order in ("dmy", "mdy"):
            day, month = (a, b) if order == "dmy" else (b, a)
            dates[has_other] = pd.to_datetime(
                {"year": other.loc[has_other, 2].astype(int), "month": month, "day": day}, errors="coerce"
            )
    return dates, order


def sample_id_map(points: pd.DataFrame, *, rounds: int = 1) -> dict[str, tuple[str, int]]:
    """Normalised label sample id -> (point id, label round) for rounds 1 to ``rounds``.

    Hyphens, spaces and case are ignored, as on the labels
    (:func:`fieldplan.samples.ids.normalise_id`). Empty when the plan has no sample ids.
    """
    from fieldplan.samples.ids import normalise_id, round_sample_ids

    if "sample_id" not in points.columns:
        return {}
    ids = points["sample_id"].fillna("").astype(str)
    ok = ids != ""
    if not ok.any():
        return {}
    pids = points.loc[ok, "point_id"].astype(str).to_numpy()
    out: dict[str, tuple[str, int]] = {}
    for r in range(max(int(rounds), 1), 0, -1):
        labels = round_sample_ids(ids[ok].to_numpy(), r)
        out.update({normalise_id(s): (p, r) for s, p in zip(labels, pids, strict=True)})
    return out


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
    sample_ids: Mapping[str, tuple[str, int]] | None = None,
    date_format: str | None = None,
    first_row: int = 2,
    notes: Iterable[str] = (),
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
    sample_ids : mapping, optional, keyword-only
        :func:`sample_id_map` of the plan: lets a file keyed by the label ids
        (``sample_id``) stand in for ``point_id``.
    date_format : str, optional, keyword-only
        See :func:`parse_dates`.
    first_row : int, keyword-only
        File row number of the frame's first row (2 under a one-line header).
    notes : iterable of str, keyword-only
        Notes from reading the file, carried on the result.

    Returns
    -------
    ResultsTable
    """
    raw = frame.copy()
    notes = list(notes)
    original = {_norm(c): str(c) for c in raw.columns}
    raw.columns = [_norm(c) for c in raw.columns]
    if raw.columns.duplicated().any():
        dup = sorted(set(raw.columns[raw.columns.duplicated()]))
        raise InputError(
            f"{source}: column names {[c for c in frame.columns if _norm(c) in dup]} are the same once case and "
            "punctuation are ignored; rename them so each is unique"
        )
    if "date" not in raw.columns:
        alias = next((c for c in DATE_ALIASES if c in raw.columns), None)
        if alias is not None:
            raw = raw.rename(columns={alias: "date"})
            notes.append(f"column {original[alias]!r} read as the sampling date")
    rows = np.arange(len(raw)) + int(first_row)
    found: list[pd.DataFrame] = []
    if "point_id" in raw.columns:
        ids = raw["point_id"].astype("string").str.strip().fillna("")
    elif "sample_id" in raw.columns and sample_ids:
        from fieldplan.samples.ids import normalise_id

        labels = raw["sample_id"].astype("string").str.strip().fillna("")
        hit = labels.map(lambda v: sample_ids.get(normalise_id(v)) if v else None)
        ids = hit.map(lambda h: h[0] if h else "").astype("string")
        unknown = (labels != "").to_numpy() & (ids == "").to_numpy()
        if unknown.any():
            found.append(
                _problems(rows[unknown], labels[unknown], "sample_id", "unmatched sample id",
                          "not a label of this plan; row left out")
            )  # fmt: skip
        label_rounds = sorted({h[1] for h in hit if h})
        notes.append(
            "rows matched to points by sample_id (label ids"
            + (f", label round {', '.join(map(str, label_rounds))}" if label_rounds else "")
            + ")"
        )
        raw = raw.assign(point_id=ids)
        # Unknown labels are reported above; keep them out of the point id checks below.
        ids = ids.mask(pd.Series(unknown, index=ids.index), "\x00")
    elif "sample_id" in raw.columns:
        raise InputError(
            f"{source}: the file is keyed by sample_id but this plan has no sample ids "
            "(plans made with --purpose soil or ripeness have them); add a point_id column"
        )
    else:
        raise InputError(
            f"{source}: no point_id or sample_id column (found {[original[c] for c in raw.columns]}); "
            "add a column named point_id holding the plan's point ids, or sample_id with the label ids"
        )
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

    bad_label = (ids == "\x00").to_numpy()
    keep &= ~bad_label
    ids = ids.mask(pd.Series(bad_label, index=ids.index), "")
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
        dates, order = parse_dates(text.where(pd.Series(keep, index=text.index), ""), date_format=date_format,
                                   source=source)  # fmt: skip
        bad = keep & (text != "").to_numpy() & dates.isna().to_numpy()
        if bad.any():
            found.append(_problems(rows[bad], ids[bad], "date", "unreadable date", "use YYYY-MM-DD"))
        if order in ("dmy", "mdy"):
            notes.append("dates read " + ("day first (DD/MM/YYYY)" if order == "dmy" else "month first (MM/DD/YYYY)"))
        if bad.all() or not dates.notna().any():
            notes.append(f"date column {original.get('date', 'date')!r} ignored: no readable date in it")
        out["date"] = dates
    for c in others:
        if c in cols or c == "date":
            continue
        text = raw[c].astype("string").str.strip().fillna("")
        filled = text[text != ""]
        if len(filled) and (filled.str.match(_ISO_DATE) | filled.str.match(_OTHER_DATE)).mean() >= 0.5:
            notes.append(
                f"column {original.get(c, c)!r} holds dates and was ignored"
                + ("" if "date" in raw.columns else "; name it 'date' if it is the sampling date")
            )
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

    for c in ("lon", "lat"):
        if c in raw.columns:
            # Kept as text for the position check, which names a bad cell.
            t = raw[c].astype("string").str.strip().fillna("")
            t = t.mask(t.str.match(_DECIMAL_COMMA).fillna(False), t.str.replace(",", "."))
            out[c] = t.mask(t == "").astype(object).to_numpy()
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
        notes=tuple(notes),
    )


def read_results(
    path: str | Path,
    *,
    point_ids: Iterable[str] | None = None,
    value_columns: Iterable[str] | None = None,
    ranges: Mapping[str, tuple[float, float]] | None = None,
    sample_ids: Mapping[str, tuple[str, int]] | None = None,
    date_format: str | None = None,
    sheet: str | None = None,
) -> ResultsTable:
    """Read a results file (CSV or .xlsx) and check it against the plan.

    See :func:`read_table` for the file and :func:`parse_results` for the
    checks. Raises :class:`~fieldplan.errors.InputError` if the file cannot be
    read at all. Writes nothing.
    """
    raw = read_table(path, sheet=sheet)
    return parse_results(
        raw.frame,
        point_ids=point_ids,
        value_columns=value_columns,
        ranges=ranges,
        source=raw.source,
        sha256=raw.sha256,
        sample_ids=sample_ids,
        date_format=date_format,
        first_row=raw.first_row,
        notes=raw.notes,
    )


def format_problems(problems: pd.DataFrame, *, limit: int = 50, each: int = 3) -> str:
    """Plain-text list of problems: one line per problem, or one per kind when a kind repeats.

    A kind of problem (same column, same problem) met more than ``each`` times
    is summarised on one line with its count, the first rows and one example,
    so a file whose every row has the same fault does not print 140 lines.
    """
    if problems.empty:
        return "no problems found"
    lines = []
    kinds = problems.groupby(["column", "problem"], sort=False)
    for (column, problem), group in kinds:
        if len(group) <= each:
            lines += [
                f"row {int(r.row)}: {r.point_id or '-'} [{column}] {problem}" + (f" ({r.detail})" if r.detail else "")
                for r in group.itertuples(index=False)
            ]
            continue
        rows = group["row"].astype(int).tolist()
        shown = ", ".join(map(str, rows[:8])) + (", ..." if len(rows) > 8 else "")
        first = group.iloc[0]
        example = f"{first['point_id'] or '-'}" + (f" ({first['detail']})" if first["detail"] else "")
        lines.append(f"[{column}] {problem}: {len(rows)} rows ({shown}); e.g. row {rows[0]}: {example}")
    if len(lines) > limit:
        lines = lines[:limit] + [f"... and {len(lines) - limit} more lines"]
    return "\n".join(lines)


def modified_z(values: ArrayLike) -> np.ndarray:
    """Modified z-scores ``M_i = 0.6745 (x_i − x̃) / MAD`` (Iglewicz & Hoaglin 1993).

    ``x̃`` is the median and MAD the median absolute deviation from it, over the
    finite values. NaN where a value is missing, and everywhere when MAD is 0
    (more than half the values equal: no scale to judge by).
    """
    x = np.asarray(values, dtype=float)
    ok = np.isfinite(x)
    out = np.full(x.shape, np.nan)
    if not ok.any():
        return out
    med = np.median(x[ok])
    mad = np.median(np.abs(x[ok] - med))
    if mad == 0:
        return out
    out[ok] = 0.6745 * (x[ok] - med) / mad
    return out


def outlier_suspects(
    table: ResultsTable, *, threshold: float = OUTLIER_Z, min_values: int = OUTLIER_MIN_VALUES
) -> pd.DataFrame:
    """Values far from the rest of their round: ``|modified z| > threshold``.

    Each value column is judged against the whole round (all rows of the file),
    after the plausible-range check. A decimal slip (2.31 for 23.1) stands out
    because the median and MAD are not pulled by it, unlike a mean and SD.

    Returns
    -------
    pandas.DataFrame
        ``row, point_id, column, value, median, z``, one row per suspect.
    """
    parts = []
    d = table.data
    for c in table.value_columns:
        x = d[c].to_numpy(dtype=float)
        if np.isfinite(x).sum() < min_values:
            continue
        z = modified_z(x)
        hit = np.abs(np.nan_to_num(z)) > threshold
        if hit.any():
            parts.append(
                pd.DataFrame(
                    {
                        "row": d.loc[hit, "row"].to_numpy(dtype=int),
                        "point_id": d.loc[hit, "point_id"].astype(str).to_numpy(),
                        "column": c,
                        "value": x[hit],
                        "median": float(np.nanmedian(x)),
                        "z": z[hit],
                    }
                )
            )
    if not parts:
        return pd.DataFrame(columns=["row", "point_id", "column", "value", "median", "z"])
    return pd.concat(parts, ignore_index=True).sort_values(["row", "column"], kind="stable").reset_index(drop=True)


def format_outliers(suspects: pd.DataFrame, *, limit: int = 50) -> str:
    """One line per suspect value."""
    lines = [
        f"row {int(r.row)}: {r.point_id} [{r.column}] {r.value:g} (round median {r.median:g}, modified z {r.z:+.1f})"
        for r in suspects.head(limit).itertuples(index=False)
    ]
    if len(suspects) > limit:
        lines.append(f"... and {len(suspects) - limit} more")
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
    existing: pd.DataFrame | None = None,
    imported_utc: str,
    allow_duplicate: bool = False,
    round_no: int | None = None,
) -> int:
    """Store ``table`` as the next round in ``plan.gpkg`` (layer ``results``).

    Earlier rounds are kept as they are. The round is stored as a
    :func:`fieldplan.store.transaction`: the rounds already stored are read
    under the plan folder's lock (``existing``, if given, is only a caller's
    earlier look and is not trusted), and an interrupted import leaves the old
    file. Returns the new round number.

    Raises
    ------
    InputError
        If a file with the same SHA-256 was imported before and
        ``allow_duplicate`` is false, or nothing numeric is left to store.
    fieldplan.lock.PlanBusyError
        If another change holds the plan longer than the lock timeout.
    """
    from fieldplan.store import transaction

    with transaction(plan_dir) as txn:
        existing = stored_results(txn.plan.layers)
        refuse_duplicate(table, existing, allow_duplicate=allow_duplicate)
        # A number worked out before the lock may have been taken meanwhile: recount under it.
        if round_no is None or int(round_no) in set(existing["round"].tolist()):
            round_no = next_round(txn.plan.layers)
        new = long_results(table, round_no=round_no, imported_utc=imported_utc)
        if new.empty:
            raise InputError(f"{table.source}: no usable values to store; see the problems listed")
        frame = pd.concat([existing, new], ignore_index=True) if len(existing) else new
        txn.set_layer(RESULTS_LAYER, frame)
    return round_no


def active_point_ids(points: pd.DataFrame) -> set[str]:
    """Points to be sampled now: not unused spares, not marked inaccessible."""
    ids = points["point_id"].astype(str)
    if "status" not in points.columns:
        return set(ids)
    status = points["status"].fillna("selected").astype(str)
    # The statuses of fieldplan.field (spares: selected/spare; mark: replacement/substitute/inaccessible).
    return set(ids[status.isin(["selected", "replacement", "substitute"])])


@dataclass(frozen=True)
class PreparedImport:
    """A results file read and checked against a plan, ready to store; nothing written yet.

    Attributes
    ----------
    table : ResultsTable
    existing : pandas.DataFrame
        The rounds stored so far.
    round_no : int
        The number the round will get.
    suspects : pandas.DataFrame
        :func:`outlier_suspects` of the table.
    positions : pandas.DataFrame or None
        Recorded positions (``point_id, lon, lat``) from the file or a GPX, checked against the plan.
    max_offset : float or None
        Metres before a recorded position is flagged (the plan's default when not given).
    active : set of str
        The plan's active point ids; ``matched`` of them have a row, ``inactive`` lists rows for others.
    """

    table: ResultsTable
    existing: pd.DataFrame
    round_no: int
    suspects: pd.DataFrame
    positions: pd.DataFrame | None
    max_offset: float | None
    active: frozenset
    matched: int
    inactive: tuple[str, ...]


def prepare_import(
    plan,
    file: str | Path,
    *,
    value_columns: Iterable[str] | None = None,
    sheet: str | None = None,
    date_format: str | None = None,
    allow_duplicate: bool = False,
    positions: str | Path | None = None,
    max_offset: float | None = None,
) -> PreparedImport:
    """Read and check everything a results import needs, writing nothing.

    The file (:func:`read_results`, with the plan's point ids and label sample
    ids), a repeated import (:func:`refuse_duplicate`), recorded positions
    (``lon``/``lat`` columns or the GPX ``positions``, matched against the
    plan) and the outlier check are all done here, so :func:`append_round`
    runs only on input that has passed. ``plan`` is a loaded plan
    (:func:`fieldplan.store.load_plan`).
    """
    from fieldplan.field.positions import (
        default_max_offset,
        position_report,
        positions_from_table,
        read_gpx_positions,
    )

    existing = stored_results(plan.layers)
    round_no = next_round(plan.layers)
    table = read_results(
        file,
        point_ids=plan.points["point_id"].astype(str),
        value_columns=value_columns,
        sample_ids=sample_id_map(plan.points, rounds=round_no + 2),
        date_format=date_format,
        sheet=sheet,
    )
    refuse_duplicate(table, existing, allow_duplicate=allow_duplicate)
    actual = None
    if positions is not None:
        actual = read_gpx_positions(positions)
    elif "lon" in table.data.columns or "lat" in table.data.columns:
        cols = [c for c in ("point_id", "lon", "lat") if c in table.data.columns]
        actual = positions_from_table(table.data[cols], source=table.source)
    limit = None
    if actual is not None:
        limit = default_max_offset(plan.params) if max_offset is None else float(max_offset)
        position_report(plan, actual, max_offset=limit)  # unknown waypoints, bad limits fail here
    active = active_point_ids(plan.points)
    matched = set(table.data["point_id"].astype(str))
    return PreparedImport(
        table=table,
        existing=existing,
        round_no=round_no,
        suspects=outlier_suspects(table),
        positions=actual,
        max_offset=limit,
        active=frozenset(active),
        matched=len(matched & active),
        inactive=tuple(sorted(matched - active)),
    )


def next_round(layers: Mapping[str, pd.DataFrame]) -> int:
    """Number of the next round: after every round stored or removed, so none is reused."""
    taken = [0]
    for name in (RESULTS_LAYER, REMOVED_LAYER):
        frame = layers.get(name)
        if frame is not None and len(frame):
            taken.append(int(pd.to_numeric(frame["round"]).max()))
    return max(taken) + 1


def remove_round(
    plan_dir: str | Path,
    round_no: int,
    *,
    reason: str = "",
    by: str | None = None,
    now=None,
) -> dict:
    """Take round ``round_no`` out of the results and record it as an event.

    The round's rows move to the ``results_removed`` layer of ``plan.gpkg``
    (nothing is deleted) and the ``events`` table gains a ``remove-round``
    row saying which file it came from, so an auditor sees what was removed,
    when, by whom and why. Estimates ignore removed rounds.

    Returns
    -------
    dict
        ``round, source, sha256, values, event_id``.

    Raises
    ------
    OptionError
        If the plan has no such round.
    """
    from fieldplan.errors import OptionError
    from fieldplan.field.events import (
        REMOVE_ROUND,
        make_events,
        number_events,
        stored_events,
        write_numbered_events,
    )
    from fieldplan.store import transaction

    plan_dir = Path(plan_dir)
    # Read and changed under the plan's lock, committed in one swap of plan.gpkg.
    with transaction(plan_dir) as txn:
        plan = txn.plan
        results = stored_results(plan.layers)
        rounds = sorted(results["round"].unique().tolist())
        if int(round_no) not in rounds:
            have = ", ".join(map(str, rounds)) or "none"
            raise OptionError(f"{plan_dir}: no results round {round_no}; stored rounds: {have}")
        gone = results["round"] == int(round_no)
        rows = results[gone]
        source = ", ".join(sorted(set(rows["source"])))
        sha = ", ".join(sorted(set(rows["sha256"])))
        detail = f"round {int(round_no)} removed ({source}, {len(rows)} values, sha256 {sha[:12]})"
        events = make_events(
            [REMOVE_ROUND], [""], reason=f"{detail}: {reason}" if reason else detail, user=by, now=now
        )
        old = plan.layers.get(REMOVED_LAYER)
        earlier = stored_events(plan)
        stored = number_events(earlier, events)
        moved = rows.assign(removed_utc=stored["time_utc"].iloc[0], event_id=int(stored["event_id"].iloc[0]))
        if old is not None and len(old):
            moved = pd.concat([pd.DataFrame(old).drop(columns="geometry", errors="ignore"), moved], ignore_index=True)
        txn.edit(lambda path: write_numbered_events(path, stored, append=len(earlier) > 0), layers=("events",))
        txn.set_layer(REMOVED_LAYER, moved)
        txn.set_layer(RESULTS_LAYER, results[~gone].reset_index(drop=True))
    return {
        "round": int(round_no),
        "source": source,
        "sha256": sha,
        "values": int(len(rows)),
        "event_id": int(stored["event_id"].iloc[0]),
    }
