"""Laboratory paperwork: the submission sheet and the results template.

``lab_submission.csv`` lists one row per sample for the lab: sample id, status
(``selected``, ``replacement``, ``substitute``; ``spare`` with ``include_spares``), block,
depth, purpose, a blank collection date for the crew and the analyses asked
for. ``results_template.csv`` has one row per sample with ``point_id`` and
``sample_id`` and one blank column per analysis; filled in, it is read back
unchanged by ``fieldplan results`` (:func:`fieldplan.results.read_results`).
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from fieldplan.errors import OptionError
from fieldplan.samples.ids import round_sample_ids
from fieldplan.write.safe import atomic_write_text, neutralise_csv_cell, neutralise_frame

__all__ = [
    "ACTIVE_STATUSES",
    "sample_rows",
    "SUBMISSION_NAME",
    "TEMPLATE_NAME",
    "RESERVED_COLUMNS",
    "parse_analyses",
    "submission_table",
    "results_template",
    "write_lab_sheet",
]

SUBMISSION_NAME = "lab_submission.csv"
TEMPLATE_NAME = "results_template.csv"
#: Names a value column may not take: the results reader gives them other meanings.
RESERVED_COLUMNS = ("point_id", "sample_id", "unit", "date", "units_measured", "row")


def _key(name: str) -> str:
    # The results reader compares column names in lower_snake_case.
    return re.sub(r"[^0-9a-z]+", "_", name.strip().lower()).strip("_")


def parse_analyses(text: str) -> list[str]:
    """Split ``"pH,P,K"`` into analysis names, checking they make distinct columns.

    Examples
    --------
    >>> parse_analyses(" pH, P ,K ")
    ['pH', 'P', 'K']
    """
    names = [" ".join(part.split()) for part in str(text).split(",")]
    names = [n for n in names if n]
    if not names:
        raise OptionError('--analyses needs at least one name, e.g. --analyses "pH,P,K"')
    keys = [_key(n) for n in names]
    for name, key in zip(names, keys, strict=True):
        if not key:
            raise OptionError(f"--analyses: {name!r} has no letters or digits; name the analysis")
        if key in RESERVED_COLUMNS:
            raise OptionError(
                f"--analyses: {name!r} clashes with the column {key!r}; name the analysis otherwise"
            )
    seen: dict[str, str] = {}
    for name, key in zip(names, keys, strict=True):
        if key in seen:
            raise OptionError(
                f"--analyses: {seen[key]!r} and {name!r} would be the same column; list each once"
            )
        seen[key] = name
    return names


#: Point statuses whose samples are taken (see fieldplan.field.mark).
ACTIVE_STATUSES = ("selected", "replacement", "substitute")
SPARE_STATUS = "spare"


def sample_rows(points: pd.DataFrame, *, include_spares: bool = False) -> pd.DataFrame:
    """One row per sample to label or send to the lab, with its ``status``.

    Samples of active points (``selected``, ``replacement``, ``substitute``) come
    first in plan order; with ``include_spares`` the unused spares follow in the
    order they would come into use (``spare_rank``). Points marked inaccessible
    never get a sample. A composite that stands for several points (a zone
    composite) is listed once, under its first active point.
    """
    if "sample_id" not in points.columns:
        raise OptionError("the plan has no sample ids; re-run 'fieldplan plan' with this version")
    status = (
        points["status"].fillna("selected").astype(str).str.lower()
        if "status" in points.columns
        else pd.Series("selected", index=points.index)
    )
    active = status.isin(ACTIVE_STATUSES).to_numpy()
    spare = (status == SPARE_STATUS).to_numpy()
    rank = (
        pd.to_numeric(points["spare_rank"], errors="coerce").fillna(0).to_numpy()
        if "spare_rank" in points.columns
        else np.zeros(len(points))
    )
    keep = active | (spare & include_spares)
    order = np.lexsort((rank, ~active))
    order = order[keep[order]]
    out = points.iloc[order].copy()
    out["status"] = status.to_numpy()[order]
    return out.drop_duplicates("sample_id", keep="first")


def _samples(points: pd.DataFrame) -> pd.DataFrame:
    # Callers may pass rows from sample_rows (already one per sample, with a status).
    if "status" in points.columns and points["sample_id"].is_unique:
        return points
    return sample_rows(points)


def submission_table(
    points: pd.DataFrame, *, analyses: list[str], round_no: int = 1, include_spares: bool = False
) -> pd.DataFrame:
    """One row per sample: ``sample_id, status, block, depth_cm, purpose, round, collection_date, analyses``.

    Active samples only, unless ``include_spares`` (see :func:`sample_rows`).
    """
    first = sample_rows(points, include_spares=include_spares)
    n = len(first)
    depth = first["depth_cm"].fillna("").astype(str) if "depth_cm" in first else [""] * n
    purpose = first["purpose"].fillna("").astype(str) if "purpose" in first else [""] * n
    return pd.DataFrame(
        {
            "sample_id": round_sample_ids(first["sample_id"].astype(str).to_numpy(), round_no),
            "status": first["status"].to_numpy(),
            "block": first["block"].astype(str).to_numpy(),
            "depth_cm": list(depth),
            "purpose": list(purpose),
            "round": int(round_no),
            "collection_date": [""] * n,
            "analyses": [";".join(analyses)] * n,
        }
    )


def results_template(
    points: pd.DataFrame, *, analyses: list[str], round_no: int = 1, include_spares: bool = False
) -> pd.DataFrame:
    """One row per sample: ``point_id, sample_id`` and a blank column per analysis.

    A composite that stands for several points (a zone composite) is listed
    under the first of its points. The round is not a column: the results
    reader would take a column of numbers for a measurement.
    """
    first = sample_rows(points, include_spares=include_spares)
    table = pd.DataFrame(
        {
            "point_id": first["point_id"].astype(str).to_numpy(),
            "sample_id": round_sample_ids(first["sample_id"].astype(str).to_numpy(), round_no),
        }
    )
    for name in analyses:
        table[name] = ""
    return table


def write_lab_sheet(
    plan, folder: str | Path, *, analyses: list[str], round_no: int = 1, include_spares: bool = False
) -> list[Path]:
    """Write ``lab_submission.csv`` and ``results_template.csv`` into ``folder``.

    Rounds after the first are written as ``lab_submission_r2.csv`` etc., so
    earlier sheets are kept. Active samples only unless ``include_spares``.
    """
    folder = Path(folder)
    suffix = "" if round_no == 1 else f"_r{int(round_no)}"
    out = []
    opts = {"analyses": analyses, "round_no": round_no, "include_spares": include_spares}
    for name, table in (
        (SUBMISSION_NAME, submission_table(plan.points, **opts)),
        (TEMPLATE_NAME, results_template(plan.points, **opts)),
    ):
        name = name.replace(".csv", f"{suffix}.csv")
        safe = neutralise_frame(table)
        safe.columns = [neutralise_csv_cell(str(c)) for c in safe.columns]
        atomic_write_text(folder / name, safe.to_csv(index=False, lineterminator="\n"))
        out.append(folder / name)
    return out
