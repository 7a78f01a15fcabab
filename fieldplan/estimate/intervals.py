"""t-based confidence intervals and Satterthwaite degrees of freedom.

Every estimate in :mod:`fieldplan.estimate` carries a standard error and a
number of degrees of freedom; this module turns the pair into an interval.
An estimate whose standard error cannot be computed (one point, a stratum
with one point) gets NaN bounds, never a zero-width interval.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from fieldplan.errors import OptionError

__all__ = ["check_confidence", "t_interval", "satterthwaite_df"]


def check_confidence(confidence: float) -> float:
    """Return ``confidence`` as a float after checking 0 < confidence < 1."""
    c = float(confidence)
    if not 0.0 < c < 1.0:
        raise OptionError(f"confidence must lie strictly between 0 and 1 (e.g. 0.95), got {confidence!r}")
    return c


def t_interval(
    estimate: ArrayLike, se: ArrayLike, df: ArrayLike, *, confidence: float = 0.95
) -> tuple[np.ndarray, np.ndarray]:
    """Two-sided t interval ``estimate ± t_{1-α/2, df} · se``.

    Parameters
    ----------
    estimate, se, df : array_like
        Broadcastable arrays. Where ``se`` or ``df`` is NaN, or ``df < 1``,
        the bounds are NaN.
    confidence : float, keyword-only
        Two-sided confidence level, e.g. 0.95.

    Returns
    -------
    lower, upper : numpy.ndarray
    """
    c = check_confidence(confidence)
    est = np.asarray(estimate, dtype=float)
    s = np.asarray(se, dtype=float)
    d = np.asarray(df, dtype=float)
    ok = np.isfinite(s) & np.isfinite(d) & (d >= 1)
    q = np.where(ok, stats.t.ppf(0.5 + c / 2.0, np.where(ok, d, 1.0)), np.nan)
    half = q * s
    return est - half, est + half


def satterthwaite_df(a: ArrayLike, s2: ArrayLike, n: ArrayLike) -> float:
    """Effective degrees of freedom of ``Σ a_h s_h²`` (Satterthwaite 1946).

    ``n_e = (Σ a_h s_h²)² / Σ (a_h s_h²)² / (n_h − 1)``; Cochran (1977),
    *Sampling Techniques* 3rd ed., §5.4, eq. 5.16 (section and equation number
    from memory), with
    ``a_h = W_h² (1 − f_h) / n_h`` for the stratified mean.

    Strata with ``n_h < 2`` make the result NaN (their variance is unknown).
    """
    a = np.asarray(a, dtype=float)
    s2 = np.asarray(s2, dtype=float)
    n = np.asarray(n, dtype=float)
    if np.any(n < 2):
        return float("nan")
    terms = a * s2
    num = terms.sum() ** 2
    den = np.sum(terms**2 / (n - 1.0))
    if den == 0.0:
        # All strata constant: the variance is exactly zero and any df will do.
        return float(np.sum(n - 1.0))
    return float(num / den)
