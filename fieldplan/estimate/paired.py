"""Change at the same sites: paired differences between two rounds, with their interval.

When a round is measured at the same sites as an earlier one (a revisit plan,
see :mod:`fieldplan.revisit`, or two rounds of one plan), the change is
estimated from the differences site by site, ``d_i = after_i - before_i``:
mean ``d̄``, standard error ``s_d / sqrt(n)`` and the t interval with ``n - 1``
degrees of freedom (the paired t procedure; Snedecor & Cochran 1989, ch. 6.9).
Pairing removes the differences between sites from the error of the change,
which is why monitoring programmes go back to the same spots.

A site's value in a round is the mean of its units in that round (several
plants of a cluster, several readings of a sample).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from fieldplan.errors import InputError, OptionError

if TYPE_CHECKING:
    from fieldplan.plan import Plan

__all__ = [
    "site_values",
    "paired_differences",
    "paired_table",
    "previous_site_ids",
    "paired_estimates",
    "report_change",
]


def site_values(results: pd.DataFrame, value: str, *, round_no: int | None = None) -> tuple[pd.Series, int]:
    """Mean of ``value`` per ``point_id`` in one round (default the latest), and that round."""
    rows = results[results["variable"].astype(str) == value] if "variable" in results.columns else results
    if rows.empty:
        raise InputError(f"no results for {value!r}; import them with 'fieldplan results'")
    rounds = sorted(int(r) for r in rows["round"].unique())
    chosen = rounds[-1] if round_no is None else int(round_no)
    if chosen not in rounds:
        raise OptionError(f"round {chosen} holds no {value!r}; rounds with it: {', '.join(map(str, rounds))}")
    mine = rows[rows["round"].astype(int) == chosen]
    means = mine.groupby(mine["point_id"].astype(str), sort=True)["value"].mean()
    return means.dropna(), chosen


def paired_differences(after: pd.Series, before: pd.Series, *, confidence: float = 0.95) -> dict[str, float]:
    """Mean difference ``after - before`` over the sites in both, with its t interval.

    Parameters
    ----------
    after, before : pandas.Series
        Values by site id; sites missing from either are left out.
    confidence : float
        Two-sided confidence level.

    Returns
    -------
    dict
        ``n, mean_before, mean_after, mean_diff, sd_diff, se, df, t, lower, upper``;
        the interval and ``t`` are NaN for fewer than two pairs (no variance).
    """
    from fieldplan.estimate.intervals import check_confidence, t_interval

    check_confidence(confidence)
    both = pd.concat({"after": after, "before": before}, axis=1, join="inner").dropna()
    d = (both["after"] - both["before"]).to_numpy(dtype=float)
    n = int(d.size)
    out = {
        "n": n,
        "mean_before": float(both["before"].mean()) if n else math.nan,
        "mean_after": float(both["after"].mean()) if n else math.nan,
        "mean_diff": float(d.mean()) if n else math.nan,
        "sd_diff": math.nan,
        "se": math.nan,
        "df": float(n - 1) if n > 1 else math.nan,
        "t": math.nan,
        "lower": math.nan,
        "upper": math.nan,
    }
    if n < 2:
        return out
    sd = float(np.std(d, ddof=1))
    se = sd / math.sqrt(n)
    lower, upper = t_interval(out["mean_diff"], se, n - 1, confidence=confidence)
    out.update(sd_diff=sd, se=se, lower=float(lower), upper=float(upper))
    out["t"] = (
        out["mean_diff"] / se
        if se > 0
        else (math.copysign(math.inf, out["mean_diff"]) if out["mean_diff"] else math.nan)
    )
    return out


def previous_site_ids(points: pd.DataFrame, earlier_points: pd.DataFrame) -> pd.Series:
    """This plan's ``point_id`` of each earlier site id, through ``previous_sample_id``.

    A revisit plan keeps point ids; the sample-id link also pairs sites whose
    point ids were renamed. Returns a Series indexed by the earlier plan's point ids.
    """
    if "previous_sample_id" not in points.columns:
        raise InputError(
            "this plan does not revisit earlier sites (no previous_sample_id); plan it with --revisit"
        )
    earlier = dict(
        zip(earlier_points["sample_id"].astype(str), earlier_points["point_id"].astype(str), strict=False)
    )
    link = points["previous_sample_id"].astype(str).map(earlier)
    known = link.notna().to_numpy()
    if not known.any():
        raise InputError(
            "none of this plan's sites link to the earlier plan's samples; is it the plan revisited?"
        )
    return pd.Series(points["point_id"].astype(str).to_numpy()[known], index=link[known].to_numpy())


def paired_table(
    after: pd.Series,
    before: pd.Series,
    groups: pd.Series,
    *,
    confidence: float = 0.95,
) -> pd.DataFrame:
    """Paired differences per group and for all sites (``group`` ``all``).

    ``groups`` gives each site's group (block, stratum...) by site id.
    """
    rows = []
    keys = groups.reindex(after.index.intersection(before.index)).dropna()
    for name in sorted(keys.unique(), key=str):
        ids = keys.index[keys == name]
        rows.append(
            {
                "group": str(name),
                **paired_differences(after.reindex(ids), before.reindex(ids), confidence=confidence),
            }
        )
    rows.append({"group": "all", **paired_differences(after, before, confidence=confidence)})
    return pd.DataFrame(rows)


def paired_estimates(
    plan: Plan,
    *,
    value: str,
    by: str = "block",
    confidence: float = 0.95,
    round_no: int | None = None,
    previous: Plan | None = None,
    compare_round: int | None = None,
) -> tuple[pd.DataFrame, str]:
    """The change in ``value`` at the same sites, per group and overall, and a one-line heading.

    Parameters
    ----------
    plan : fieldplan.plan.Plan
        This round's plan with its results (``round_no``, default the latest).
    previous : Plan, optional
        The earlier plan this one revisits (``fieldplan plan --revisit``): its latest
        round is the "before" (``compare_round`` picks another).
    compare_round : int, optional
        Without ``previous``: the round of this plan to compare with.
    """
    from fieldplan.results import stored_results

    if previous is None and compare_round is None:
        raise OptionError("give the earlier plan or the round to compare with")
    after, after_round = site_values(stored_results(plan.layers), value, round_no=round_no)
    if previous is not None:
        before_raw, before_round = site_values(stored_results(previous.layers), value, round_no=compare_round)
        ids = previous_site_ids(plan.points, previous.points)
        before = before_raw[before_raw.index.isin(ids.index)]
        before.index = ids.reindex(before.index).to_numpy()
        label = f"round {after_round} against round {before_round} of the earlier plan {previous.params.get('plan_id', '')}"
    else:
        before, before_round = site_values(stored_results(plan.layers), value, round_no=compare_round)
        if before_round == after_round:
            raise OptionError(f"compare round {after_round} with another round, not itself")
        label = f"round {after_round} against round {before_round}"
    points = plan.points
    if by == "farm" or by not in points.columns:
        if by != "farm":
            raise OptionError(f"cannot group by {by!r}; use block, stratum or farm")
        groups = pd.Series("farm", index=points["point_id"].astype(str).to_numpy())
    else:
        groups = pd.Series(points[by].astype(str).to_numpy(), index=points["point_id"].astype(str).to_numpy())
    groups = groups[~groups.index.duplicated()]
    table = paired_table(after, before, groups, confidence=confidence)
    if by == "farm":
        table = table[table["group"] == "all"].reset_index(drop=True)
    return table, f"{value}: change at the same sites, {label}"


CHANGES_NAME = "changes.csv"


def report_change(
    plan_dir: str | Path,
    value: str,
    *,
    by: str,
    confidence: float,
    round_no: int | None,
    previous: str | Path | None,
    compare_round: int | None,
    quiet: bool,
) -> None:
    """``fieldplan estimate --previous/--compare-round``: write changes.csv and print the table."""
    from pathlib import Path

    import typer

    from fieldplan.results import normalise_column
    from fieldplan.store import load_plan
    from fieldplan.write.safe import atomic_write_text, neutralise_frame

    plan = load_plan(plan_dir)
    earlier = load_plan(previous) if previous is not None else None
    name = normalise_column(value)
    table, heading = paired_estimates(
        plan,
        value=name,
        by=by,
        confidence=confidence,
        round_no=round_no,
        previous=earlier,
        compare_round=compare_round,
    )
    out = table.copy()
    out.insert(0, "variable", name)
    out.insert(1, "confidence", confidence)
    csv = neutralise_frame(out).to_csv(index=False, float_format="%.6g", lineterminator="\n")
    atomic_write_text(Path(plan_dir) / CHANGES_NAME, csv)
    if quiet:
        return
    pct = f"{100 * confidence:g}%"
    head = ["group", "pairs", "before", "after", "change", "se", f"{pct} interval"]
    lines = []
    for r in table.to_dict("records"):
        interval = "—" if math.isnan(r["lower"]) else f"{r['lower']:.3f} – {r['upper']:.3f}"
        lines.append(
            [
                r["group"],
                str(r["n"]),
                *(f"{r[k]:.3f}" for k in ("mean_before", "mean_after", "mean_diff")),
                "—" if math.isnan(r["se"]) else f"{r['se']:.3f}",
                interval,
            ]
        )
    widths = [max(len(h), *(len(c[i]) for c in lines)) for i, h in enumerate(head)]
    typer.echo(heading)
    typer.echo("  ".join(h.ljust(w) for h, w in zip(head, widths, strict=True)).rstrip())
    for cells in lines:
        typer.echo("  ".join(c.ljust(w) for c, w in zip(cells, widths, strict=True)).rstrip())
    typer.echo(f"-> {Path(plan_dir) / CHANGES_NAME}")
