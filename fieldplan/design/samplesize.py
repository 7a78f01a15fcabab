"""Sample size for estimating a mean, with finite population and cluster corrections.

Formulas (Cochran, *Sampling Techniques*, 3rd ed., 1977, chapter 4; Kish,
*Survey Sampling*, 1965, section 5.4, where the design effect is written
``1 + roh (b - 1)``; section numbers recalled, not checked against a copy):

* relative margin ``e`` (same units as the coefficient of variation ``CV``):
  ``n0 = (q * CV / e)**2``;
* absolute margin ``d`` (same units as the standard deviation ``S``):
  ``n0 = (q * S / d)**2``;
* finite population correction, ``fpc="mean"``: ``n = n0 / (1 + n0 / N)``. This
  is the exact solution of ``q * S / sqrt(n) * sqrt(1 - n / N) = d``, the
  margin of the mean of a simple random sample without replacement.
  ``fpc="proportion"``: ``n = n0 / (1 + (n0 - 1) / N)``, the form Cochran gives
  for proportions (whose variance uses ``N - 1``);
* ``q`` is the normal quantile ``z`` or, with ``distribution="t"``, Student's
  ``t`` with ``n - 1`` degrees of freedom, found by replacing ``z`` with
  ``t_{n-1}`` until ``n`` stops changing, then settling on the smallest whole
  ``n`` that meets the margin;
* clusters of ``m`` units with intra-cluster correlation ``rho``: Kish's design
  effect ``deff = 1 + (m - 1) * rho``; the number of clusters is
  ``ceil(n * deff / m)``. With Student's t the degrees of freedom are those
  of the clusters, ``k - 1``: the variance of a cluster sample is estimated
  from the spread between its ``k`` clusters, not between its units (Cochran
  1977, ch. 9; Kish 1965, ch. 5 -- chapters from memory). The smallest ``k``
  with ``k >= ceil(n_k * deff / m)``, ``n_k`` on ``t_{k-1}``, is taken.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any, Literal

from fieldplan.design.quantiles import norm_ppf, t_ppf
from fieldplan.errors import OptionError

__all__ = ["SampleSize", "design_effect", "n_clusters", "sample_size"]

# Whole-number results are rounded up; this tolerance stops 24.000000000001
# (float noise) from becoming 25.
_CEIL_TOL = 1e-9


def _ceil(x: float) -> int:
    return int(math.ceil(x - _CEIL_TOL))


@dataclass(frozen=True)
class SampleSize:
    """A sample-size calculation: its inputs, the formula used and the result.

    Attributes
    ----------
    mode : {"relative", "absolute"}
        Whether the margin is relative to the mean (with ``cv``) or absolute
        (with ``sd``).
    n0 : float
        Sample size before the finite population correction.
    n_fpc : float
        Sample size after the finite population correction (``n0`` without it).
    n : int
        Sampling units needed under simple random sampling.
    deff : float
        Design effect (1 without clustering).
    clusters : int or None
        Clusters of ``units_per_cluster`` units needed, if clustered.
    units_total : int
        Units to collect: ``clusters * units_per_cluster`` or ``n``.
    formula : str
        The formulas, with the numbers substituted, for reports.
    """

    mode: str
    confidence: float
    margin: float
    cv: float | None
    sd: float | None
    population: int | None
    distribution: str
    fpc: str
    critical_value: float
    iterations: int
    n0: float
    n_fpc: float
    n: int
    units_per_cluster: int | None
    icc: float | None
    deff: float
    clusters: int | None
    units_total: int
    formula: str

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-serialisable dictionary of inputs and results."""
        return asdict(self)


def design_effect(units_per_cluster: int, icc: float) -> float:
    """Kish's design effect ``1 + (m - 1) * rho`` for clusters of ``m`` units.

    Parameters
    ----------
    units_per_cluster : int
        Units ``m`` taken per cluster (at least 1).
    icc : float
        Intra-cluster correlation ``rho``, between ``-1 / (m - 1)`` and 1.
    """
    m = int(units_per_cluster)
    if m < 1 or m != units_per_cluster:
        raise OptionError(f"units per cluster must be a whole number of 1 or more, got {m}")
    if not -1.0 <= icc <= 1.0:
        raise OptionError(f"intra-cluster correlation must be between -1 and 1, got {icc}")
    deff = 1.0 + (m - 1) * float(icc)
    if deff <= 0:
        raise OptionError(f"icc={icc} is below -1/(m-1) for m={m}; the design effect would be <= 0")
    return deff


def n_clusters(n: float, *, units_per_cluster: int, icc: float) -> int:
    """Clusters needed to match a simple random sample of ``n`` units: ``ceil(n*deff/m)``."""
    return _ceil(n * design_effect(units_per_cluster, icc) / units_per_cluster)


def _apply_fpc(n0: float, population: int | None, fpc: str) -> float:
    if population is None:
        return n0
    if fpc == "mean":
        return n0 / (1.0 + n0 / population)
    return n0 / (1.0 + (n0 - 1.0) / population)


def sample_size(
    *,
    margin: float,
    cv: float | None = None,
    sd: float | None = None,
    confidence: float = 0.95,
    population: int | None = None,
    distribution: Literal["z", "t"] = "t",
    fpc: Literal["mean", "proportion"] = "mean",
    units_per_cluster: int | None = None,
    icc: float | None = None,
) -> SampleSize:
    """Sample size to estimate a mean within a margin at a confidence level.

    Parameters
    ----------
    margin : float
        Half-width of the confidence interval: relative to the mean (same units
        as ``cv``, e.g. both in percent) or absolute (same units as ``sd``).
    cv : float, optional
        Coefficient of variation; gives a relative margin. Exactly one of ``cv``
        and ``sd`` must be given.
    sd : float, optional
        Standard deviation; gives an absolute margin.
    confidence : float
        Two-sided confidence level, e.g. 0.95.
    population : int, optional
        Number of units in the population ``N`` (finite population correction).
    distribution : {"z", "t"}
        Normal quantile, or Student's t iterated on ``n - 1`` degrees of freedom.
    fpc : {"mean", "proportion"}
        Form of the finite population correction (see module docstring).
    units_per_cluster : int, optional
        Units per cluster ``m``; with ``icc`` gives clusters needed.
    icc : float, optional
        Intra-cluster correlation ``rho``.

    Returns
    -------
    SampleSize

    Examples
    --------
    >>> sample_size(cv=25, margin=10, distribution="z").n
    25
    """
    if (cv is None) == (sd is None):
        raise OptionError("give exactly one of a coefficient of variation or a standard deviation")
    spread = float(cv if cv is not None else sd)
    mode = "relative" if cv is not None else "absolute"
    if not spread > 0 or not math.isfinite(spread):
        raise OptionError(f"the {'CV' if cv is not None else 'SD'} must be positive, got {spread}")
    if not margin > 0 or not math.isfinite(margin):
        raise OptionError(f"the margin must be positive, got {margin}")
    if not 0.0 < confidence < 1.0:
        raise OptionError(f"confidence must be between 0 and 1 (e.g. 0.95), got {confidence}")
    if distribution not in ("z", "t"):
        raise OptionError(f"distribution must be 'z' or 't', got {distribution!r}")
    if fpc not in ("mean", "proportion"):
        raise OptionError(f"fpc must be 'mean' or 'proportion', got {fpc!r}")
    if population is not None and (int(population) != population or population < 2):
        raise OptionError(f"population size must be a whole number of 2 or more, got {population}")
    if (units_per_cluster is None) != (icc is None):
        raise OptionError("clusters need both units per cluster and an intra-cluster correlation")

    ratio = spread / float(margin)
    tail = 1.0 - (1.0 - confidence) / 2.0

    def needed(q: float) -> float:
        return _apply_fpc((q * ratio) ** 2, population, fpc)

    q = norm_ppf(tail)
    iterations = 0
    n = _ceil(needed(q))
    clustered = units_per_cluster is not None and icc is not None
    if clustered:
        deff = design_effect(units_per_cluster, icc)
        m = int(units_per_cluster)

        def clusters_for(q_k: float) -> int:
            return _ceil(_ceil(needed(q_k)) * deff / m)

        k = max(clusters_for(q), 2 if distribution == "t" else 1)
        if distribution == "t":
            # t on k - 1 degrees of freedom, k clusters: the same search as below, over clusters.
            seen = {k}
            for iterations in range(1, 51):  # noqa: B007 - the count is reported
                new = max(2, clusters_for(t_ppf(tail, k - 1)))
                if new == k or new in seen:
                    k = max(k, new)  # a two-cycle: the step search below settles it
                    break
                seen.add(new)
                k = new
            while k > 2 and k - 1 >= clusters_for(t_ppf(tail, k - 2)):
                k -= 1
            while k < clusters_for(t_ppf(tail, k - 1)):
                k += 1
            q = t_ppf(tail, k - 1)
        n = _ceil(needed(q))
        if population is not None:
            n = min(n, int(population))
        return _result(
            mode=mode, confidence=confidence, margin=margin, cv=cv, sd=sd, population=population,
            distribution=distribution, fpc=fpc, q=q, iterations=iterations, ratio=ratio, spread=spread,
            n_fpc=needed(q), n=n, units_per_cluster=m, icc=icc, deff=deff, clusters=k,
        )  # fmt: skip
    if distribution == "t":
        n = max(n, 2)

        def meets(k: int) -> bool:
            return k >= _ceil(needed(t_ppf(tail, k - 1)))

        for iterations in range(1, 51):  # noqa: B007 - the count is reported
            new = max(2, _ceil(needed(t_ppf(tail, n - 1))))
            if new == n:
                break
            n = new
        # The set of n that meet the margin is closed upwards (t falls as n
        # grows), so step to its smallest member in case the iteration settled
        # on a two-cycle.
        while n > 2 and meets(n - 1):
            n -= 1
        while not meets(n):
            n += 1
        q = t_ppf(tail, n - 1)
    if population is not None:
        n = min(n, int(population))
    return _result(
        mode=mode, confidence=confidence, margin=margin, cv=cv, sd=sd, population=population,
        distribution=distribution, fpc=fpc, q=q, iterations=iterations, ratio=ratio, spread=spread,
        n_fpc=needed(q), n=n, units_per_cluster=None, icc=None, deff=1.0, clusters=None,
    )  # fmt: skip


def _result(
    *, mode, confidence, margin, cv, sd, population, distribution, fpc, q, iterations, ratio, spread,
    n_fpc, n, units_per_cluster, icc, deff, clusters,
) -> SampleSize:  # fmt: skip
    n0 = (q * ratio) ** 2
    symbol = "t" if distribution == "t" else "z"
    lines = []
    if mode == "relative":
        lines.append(f"n0 = ({symbol} * CV / e)^2 = ({q:.4f} * {spread:g} / {margin:g})^2 = {n0:.3f}")
    else:
        lines.append(f"n0 = ({symbol} * S / d)^2 = ({q:.4f} * {spread:g} / {margin:g})^2 = {n0:.3f}")
    if population is not None:
        form = "n0 / (1 + n0 / N)" if fpc == "mean" else "n0 / (1 + (n0 - 1) / N)"
        lines.append(f"n = {form} = {n_fpc:.3f} with N = {population}")
    if distribution == "t":
        if clusters is not None:
            lines.append(f"{symbol} on {clusters - 1} degrees of freedom (clusters - 1) after {iterations} iteration(s)")
        else:
            lines.append(f"{symbol} on {n - 1} degrees of freedom after {iterations} iteration(s)")
    lines.append(f"n = {n} units")
    units_total = n
    if clusters is not None:
        units_total = clusters * int(units_per_cluster)
        lines.append(f"deff = 1 + (m - 1) * rho = 1 + ({units_per_cluster} - 1) * {icc:g} = {deff:.4f}")
        plain = _ceil(n * deff / units_per_cluster)
        lines.append(
            f"clusters = ceil(n * deff / m) = ceil({n} * {deff:.4f} / {units_per_cluster}) = {plain}"
            + ("" if plain == clusters else f"; {clusters} are the fewest meeting the margin on their own df")
            + f" ({units_total} units)"
        )
    return SampleSize(
        mode=mode,
        confidence=float(confidence),
        margin=float(margin),
        cv=None if cv is None else float(cv),
        sd=None if sd is None else float(sd),
        population=None if population is None else int(population),
        distribution=distribution,
        fpc=fpc,
        critical_value=q,
        iterations=iterations,
        n0=n0,
        n_fpc=n_fpc,
        n=n,
        units_per_cluster=None if units_per_cluster is None else int(units_per_cluster),
        icc=None if icc is None else float(icc),
        deff=deff,
        clusters=clusters,
        units_total=units_total,
        formula="\n".join(lines),
    )
