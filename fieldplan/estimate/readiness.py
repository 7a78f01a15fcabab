"""Readiness: how likely a block has reached a target, and when it will.

* ``P(μ ≥ target)`` for one round uses the t distribution of the estimate,
  ``P = F_t,df((ȳ − target) / se)``: the probability, under a flat prior, that
  the true block mean has reached the target. It is a statement about the
  block mean, not about every vine. A target reached from above (titratable
  acidity falls as fruit ripens) uses ``P(μ ≤ target) = 1 − P(μ ≥ target)``.
* With two or more dated rounds, a straight line is fitted per block to the
  round means by weighted least squares with weights ``1 / se_r²`` (each
  round's mean is known only to its sampling error). Time is centred on the
  weighted mean date so intercept and slope are uncorrelated, and the date the
  line reaches the target is ``t* = t̄ + (target − a) / b``. Its standard error
  comes from the delta method,
  ``se(t*) = √(var a + (t* − t̄)² var b) / |b|``,
  and the interval is ``t* ± z · se(t*)``. With three or more rounds the
  variances are scaled up by the reduced chi-square when the points scatter
  more than their sampling errors allow (lack of fit). No date is projected
  when the slope does not differ from zero at the chosen confidence, because
  the ratio then has no finite interval (Fieller 1954).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

from fieldplan.errors import InputError
from fieldplan.estimate.intervals import check_confidence

__all__ = [
    "DIRECTIONS",
    "FALLING",
    "prob_reached",
    "TrendProjection",
    "project_date",
    "project_blocks",
    "check_target",
    "target_direction",
]

DIRECTIONS = ("above", "below")
#: Variables whose target is reached from above as the crop ripens: acidity falls
#: (common practice, no source).
FALLING = ("titratable_acidity_g_l", "ta", "titratable_acidity", "malic_acid", "malic_acid_g_l", "firmness")
#: A target further than this many times the spread of the observed values beyond
#: them is refused as a likely typo (common practice, no source).
FAR_FACTOR = 2.0


def prob_reached(
    mean: ArrayLike, se: ArrayLike, df: ArrayLike, target: float, *, direction: str = "above"
) -> np.ndarray:
    """``P(true mean ≥ target)`` (or ``≤`` with ``direction="below"``) from the t distribution.

    NaN where the standard error or degrees of freedom are unknown.
    """
    if direction not in DIRECTIONS:
        raise InputError(f"target direction must be one of {', '.join(DIRECTIONS)}; got {direction!r}")
    m = np.asarray(mean, dtype=float)
    s = np.asarray(se, dtype=float)
    d = np.asarray(df, dtype=float)
    ok = np.isfinite(s) & np.isfinite(d) & (d >= 1) & (s > 0)
    z = np.where(ok, (m - float(target)) / np.where(ok, s, 1.0), np.nan)
    if direction == "below":
        z = -z
    return np.where(ok, stats.t.cdf(z, np.where(ok, d, 1.0)), np.nan)


def target_direction(value: str, *, below: bool | None = None) -> tuple[str, str]:
    """Direction a target is reached from, and why: the option if given, else the variable's habit.

    Returns ``(direction, reason)``; ``reason`` is '' when the option decided.
    """
    if below is not None:
        return ("below" if below else "above"), ""
    if value in FALLING:
        return "below", f"{value} falls as the crop ripens, so the target is reached from above"
    return "above", ""


def check_target(values: ArrayLike, target: float, *, value: str = "value", round_no: int | None = None) -> None:
    """Refuse a target far outside the observed values (a typo or a unit mix-up).

    A target more than ``FAR_FACTOR`` times the observed range (lowest to
    highest value of the round) beyond that range is refused: the projection
    would extrapolate a straight line far past anything measured.
    """
    x = np.asarray(values, dtype=float)
    x = x[np.isfinite(x)]
    if x.size == 0:
        return
    lo, hi = float(x.min()), float(x.max())
    span = max(hi - lo, 0.1 * max(abs(lo), abs(hi)), 1e-9)
    low, high = lo - FAR_FACTOR * span, hi + FAR_FACTOR * span
    if not low <= float(target) <= high:
        where = f" in round {round_no}" if round_no is not None else ""
        raise InputError(
            f"--target {target:g} is far outside the observed {value} values ({lo:g} to {hi:g}{where}); "
            f"check the units and the decimal point (targets between {low:.3g} and {high:.3g} are accepted)"
        )


@dataclass(frozen=True)
class TrendProjection:
    """Straight-line trend of block means and projected date of the target."""

    slope_per_day: float
    slope_se: float
    rounds: int
    date: pd.Timestamp | None
    date_lower: pd.Timestamp | None
    date_upper: pd.Timestamp | None
    se_days: float
    note: str = ""


def project_date(
    dates: ArrayLike,
    means: ArrayLike,
    ses: ArrayLike,
    target: float,
    *,
    confidence: float = 0.95,
    direction: str = "above",
) -> TrendProjection:
    """Fit a weighted line to dated round means and project the target date.

    Parameters
    ----------
    dates : array_like of datetime-like
        Date of each round (one value per round).
    means, ses : array_like of float
        Round means and their standard errors (> 0).
    target : float
        Value to reach.
    confidence : float, keyword-only
    direction : {"above", "below"}, keyword-only
        Whether the target is reached by rising to it or falling to it; a trend
        heading the other way gets no date.
    """
    c = check_confidence(confidence)
    t_all = pd.to_datetime(pd.Series(np.asarray(dates)), errors="coerce")
    y = np.asarray(means, dtype=float)
    s = np.asarray(ses, dtype=float)
    keep = t_all.notna().to_numpy() & np.isfinite(y) & np.isfinite(s) & (s > 0)
    t_all, y, s = t_all[keep], y[keep], s[keep]
    k = len(y)
    none = TrendProjection(np.nan, np.nan, k, None, None, None, np.nan)
    if k < 2 or t_all.nunique() < 2:
        return _with_note(none, "no trend: needs 2 or more dated rounds with intervals")
    origin = t_all.min()
    t = (t_all - origin).dt.total_seconds().to_numpy() / 86400.0
    w = 1.0 / s**2
    tbar = np.sum(w * t) / w.sum()
    tc = t - tbar
    sxx = np.sum(w * tc**2)
    b = np.sum(w * tc * y) / sxx
    a = np.sum(w * y) / w.sum()
    var_a, var_b = 1.0 / w.sum(), 1.0 / sxx
    if k >= 3:
        chi2 = np.sum(w * (y - a - b * tc) ** 2) / (k - 2)
        var_a, var_b = var_a * max(1.0, chi2), var_b * max(1.0, chi2)
    se_b = float(np.sqrt(var_b))
    z = stats.norm.ppf(0.5 + c / 2.0)
    base = TrendProjection(float(b), se_b, k, None, None, None, np.nan)
    if abs(b) <= z * se_b:
        return _with_note(base, "no projection: trend not distinguishable from flat")
    if (b < 0) == (direction == "above"):
        way = "falling" if b < 0 else "rising"
        return _with_note(base, f"no projection: the trend is {way}, away from a target reached from {direction}")
    dt = (target - a) / b
    se_t = float(np.sqrt(var_a + dt**2 * var_b) / abs(b))
    day = pd.Timedelta(days=1)
    centre = origin + (tbar + dt) * day
    note = "target already passed by the fitted line" if tbar + dt < t.max() else ""
    return TrendProjection(
        float(b),
        se_b,
        k,
        centre.round("D"),
        (centre - z * se_t * day).round("D"),
        (centre + z * se_t * day).round("D"),
        se_t,
        note,
    )


def _with_note(p: TrendProjection, note: str) -> TrendProjection:
    return TrendProjection(
        p.slope_per_day, p.slope_se, p.rounds, p.date, p.date_lower, p.date_upper, p.se_days, note
    )


def project_blocks(
    rounds: pd.DataFrame, target: float, *, confidence: float = 0.95, direction: str = "above"
) -> pd.DataFrame:
    """Project the target date for every block.

    Parameters
    ----------
    rounds : pandas.DataFrame
        Columns ``group, date, mean, se``: one row per block and round.
    target : float
    confidence : float, keyword-only

    Returns
    -------
    pandas.DataFrame
        ``group, rounds, slope_per_day, slope_se, target_date, date_lower,
        date_upper, note``.
    """
    need = {"group", "date", "mean", "se"}
    if not need <= set(rounds.columns):
        raise InputError(f"round table needs columns {sorted(need)}, got {list(rounds.columns)}")
    rows = []
    # One small fit per block (a handful of rounds each), not per point.
    for g, sub in rounds.groupby("group", sort=True):
        p = project_date(sub["date"], sub["mean"], sub["se"], target, confidence=confidence, direction=direction)
        rows.append(
            {
                "group": g,
                "rounds": p.rounds,
                "slope_per_day": p.slope_per_day,
                "slope_se": p.slope_se,
                "target_date": p.date,
                "date_lower": p.date_lower,
                "date_upper": p.date_upper,
                "note": p.note,
            }
        )
    return pd.DataFrame(rows)
