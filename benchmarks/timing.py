"""Timing helpers and the result record every study returns."""

from __future__ import annotations

import gc
import statistics
import time
import tracemalloc
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from typing import Any

__all__ = ["Result", "best_time", "median_time", "peak_memory", "alternating", "fast_vs_slow"]


@dataclass
class Result:
    """One measured ratio and its target.

    ``ratio`` is always a quotient of two timings (or memory peaks) taken in the
    same run, so it does not depend on how fast the machine is. ``better`` says
    which way passes: ``"higher"`` means ``ratio >= target``.
    """

    study: str
    name: str
    ratio: float
    target: float
    better: str
    unit: str = "x"
    details: dict[str, Any] = field(default_factory=dict)
    informational: bool = False

    @property
    def passed(self) -> bool:
        if self.better == "higher":
            return self.ratio >= self.target
        return self.ratio <= self.target

    def as_dict(self) -> dict[str, Any]:
        return {**asdict(self), "passed": self.passed}


def _run_times(fn: Callable[[], Any], repeat: int) -> list[float]:
    times = []
    for _ in range(repeat):
        gc.collect()
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return times


def best_time(fn: Callable[[], Any], *, repeat: int = 3) -> float:
    """Fastest of ``repeat`` wall-clock runs (the least disturbed by other load)."""
    return min(_run_times(fn, repeat))


def median_time(fn: Callable[[], Any], *, repeat: int = 3) -> float:
    """Median of ``repeat`` wall-clock runs."""
    return statistics.median(_run_times(fn, repeat))


def alternating(a: Callable[[], Any], b: Callable[[], Any], *, repeat: int = 3) -> tuple[float, float]:
    """Best times of ``a`` and ``b`` run in turn, so slow spells of the machine hit both."""
    ta, tb = [], []
    for _ in range(repeat):
        for fn, out in ((a, ta), (b, tb)):
            gc.collect()
            start = time.perf_counter()
            fn()
            out.append(time.perf_counter() - start)
    return min(ta), min(tb)


def fast_vs_slow(
    fast: Callable[[], Any], slow: Callable[[], Any], *, inner: int, runs: int
) -> tuple[float, float]:
    """Seconds per pass of ``fast`` and of ``slow``: medians over ``runs`` runs taken in turn.

    One pass of the fast side takes a few milliseconds, near the timer's and the
    scheduler's jitter, so each run times ``inner`` passes of it; alternating
    with the slow side and taking medians keeps one slow spell from deciding.
    """

    def fast_inner():
        for _ in range(inner):
            fast()

    pairs = [alternating(fast_inner, slow, repeat=1) for _ in range(runs)]
    return statistics.median(a for a, _ in pairs) / inner, statistics.median(b for _, b in pairs)


def peak_memory(fn: Callable[[], Any]) -> int:
    """Peak bytes allocated through Python's allocators while ``fn`` runs (tracemalloc).

    numpy arrays are traced; memory GEOS allocates inside shapely is not.
    """
    gc.collect()
    tracemalloc.start()
    try:
        fn()
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return peak
