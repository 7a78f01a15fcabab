"""Sampling calendar: rounds of block sampling placed on crew working days.

Each block needs ``hours`` of crew time per round. A block either has a due date
(one round), a repeat interval such as ``7d``, ``2w``, ``1m`` or ``1y`` (a round
released every interval, each due the day before the next is released), both
(the first round is due on the due date), or neither (one round due by the end
of the horizon).

Rounds are placed one at a time in priority order into the earliest free crew
time between their release and due dates, crew by crew, day by day; a round may
spread over several crews and days. A round whose hours do not fit in the free
time of its window is not placed at all and is reported.

Priority rule (documented, deliberate):

1. earlier due date first;
2. then, where readiness figures exist, the block closer to its target: the
   earlier projected date of reaching the target first, then the higher
   probability of having reached it;
3. then block name and round number, so the result is deterministic.

So readiness decides between rounds that are due together (e.g. weekly rounds
of every block), which is when it matters: blocks nearing target are sampled
earlier in the week.

Events are one per crew and working day, listing the blocks of that day, and
export as RFC 5545 iCalendar (floating local times; a fixed DTSTAMP derived from
the start date keeps the file byte-identical between runs).
"""

from __future__ import annotations

import calendar
import hashlib
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, time, timedelta

import numpy as np
import pandas as pd

from fieldplan.errors import OptionError

__all__ = [
    "DEFAULT_WORKDAYS",
    "CrewDay",
    "Job",
    "Schedule",
    "add_interval",
    "block_hours",
    "make_schedule",
    "parse_interval",
    "parse_workdays",
    "to_icalendar",
]

#: Monday to Friday (``date.weekday()`` numbers).
DEFAULT_WORKDAYS = frozenset(range(5))
_DAY_NAMES = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")
_INTERVAL = re.compile(r"^\s*(\d+)\s*([dwmy])\s*$", re.IGNORECASE)


def parse_interval(text: str) -> tuple[int, str]:
    """Parse a repeat interval: ``"7d"``, ``"2w"``, ``"1m"`` (months) or ``"1y"``.

    Returns
    -------
    (count, unit) with unit one of ``d``, ``w``, ``m``, ``y``.
    """
    match = _INTERVAL.match(str(text))
    if not match or int(match.group(1)) < 1:
        raise OptionError(
            f"repeat interval {text!r} is not understood; use a whole number and a unit, e.g. 7d, 2w, 1m, 1y"
        )
    return int(match.group(1)), match.group(2).lower()


def add_interval(day: date, count: int, unit: str) -> date:
    """``day`` moved on by ``count`` units; months keep the day, clamped to month end."""
    if unit == "d":
        return day + timedelta(days=count)
    if unit == "w":
        return day + timedelta(weeks=count)
    months = count * (12 if unit == "y" else 1)
    if unit not in ("m", "y"):
        raise OptionError(f"interval unit {unit!r} must be one of d, w, m, y")
    year, month0 = divmod(day.month - 1 + months, 12)
    year += day.year
    last = calendar.monthrange(year, month0 + 1)[1]
    return date(year, month0 + 1, min(day.day, last))


def parse_workdays(text: str) -> frozenset[int]:
    """Parse working days: ``"mon-fri"``, ``"mon,wed,fri"``, ``"mon-sat"``."""
    days: set[int] = set()
    for part in str(text).lower().replace(" ", "").split(","):
        ends = part.split("-")
        try:
            idx = [_DAY_NAMES.index(e[:3]) for e in ends]
        except ValueError:
            raise OptionError(
                f"working days {text!r} not understood; use names like mon-fri or mon,wed,fri"
            ) from None
        if len(idx) == 1:
            days.add(idx[0])
        elif len(idx) == 2:
            a, b = idx
            days.update(range(a, b + 1) if a <= b else [*range(a, 7), *range(0, b + 1)])
        else:
            raise OptionError(f"working days {text!r}: a range has two ends, e.g. mon-fri")
    if not days:
        raise OptionError("working days are empty; give e.g. mon-fri")
    return frozenset(days)


@dataclass(frozen=True)
class Job:
    """Work for one block.

    Attributes
    ----------
    block : str
        Block name.
    hours : float
        Crew-hours one round takes.
    due : date, optional
        Date the (first) round must be finished by.
    every : str, optional
        Repeat interval, e.g. ``"7d"``.
    probability : float, optional
        Probability the block has reached its target (higher goes sooner).
    target_date : date, optional
        Projected date the block reaches its target (earlier goes sooner).
    """

    block: str
    hours: float
    due: date | None = None
    every: str | None = None
    probability: float | None = None
    target_date: date | None = None


@dataclass(frozen=True)
class CrewDay:
    """One crew's working day: blocks with the hours spent on each round."""

    day: date
    crew: str
    start: datetime
    end: datetime
    items: tuple[tuple[str, int, float], ...]  # (block, round, hours)


@dataclass(frozen=True)
class Schedule:
    """Result of :func:`make_schedule`."""

    events: tuple[CrewDay, ...]
    unfitted: tuple[dict, ...] = field(default_factory=tuple)
    start: date | None = None

    def rows(self) -> pd.DataFrame:
        """One row per crew, day and block round."""
        cols = ["date", "crew", "block", "round", "hours", "start", "end"]
        out = [
            {
                "date": e.day.isoformat(),
                "crew": e.crew,
                "block": b,
                "round": r,
                "hours": h,
                "start": e.start.strftime("%H:%M"),
                "end": e.end.strftime("%H:%M"),
            }
            for e in self.events
            for b, r, h in e.items
        ]
        return pd.DataFrame(out, columns=cols)

    def unfitted_rows(self) -> pd.DataFrame:
        """Block rounds that could not be placed, with the reason."""
        cols = ["block", "round", "release", "due", "hours", "free_hours", "reason"]
        return pd.DataFrame(list(self.unfitted), columns=cols)


def _rounds(job: Job, *, start: date, until: date) -> list[tuple[int, date, date]]:
    """(round, release, due) for a job within the horizon."""
    if job.every is None:
        return [(1, start, min(job.due, until) if job.due else until)]
    count, unit = parse_interval(job.every)
    out = []
    release = start
    r = 1
    while release <= until:
        nxt = add_interval(start, count * r, unit)
        due = nxt - timedelta(days=1)
        if r == 1 and job.due is not None:
            due = job.due
        out.append((r, release, min(due, until)))
        release, r = nxt, r + 1
    return out


def make_schedule(
    jobs: Sequence[Job],
    *,
    crews: int | Sequence[str],
    hours_per_day: float,
    start: date,
    until: date | None = None,
    workdays: frozenset[int] = DEFAULT_WORKDAYS,
    day_start: time = time(7, 0),
) -> Schedule:
    """Place block rounds on crew working days.

    Parameters
    ----------
    jobs : sequence of Job
        One per block.
    crews : int or sequence of str
        Number of crews (named "Crew 1"...) or their names.
    hours_per_day : float
        Working hours of one crew in one day.
    start : date
        First day of the calendar.
    until : date, optional
        Last day; default the later of the last due date and 364 days on.
    workdays : set of int
        Allowed weekdays (0 = Monday).
    day_start : time
        Clock time work starts each day (events are floating local times).

    Returns
    -------
    Schedule
    """
    names = [f"Crew {i + 1}" for i in range(crews)] if isinstance(crews, int) else list(crews)
    if not names:
        raise OptionError("--crews must be at least 1")
    if not 0 < hours_per_day <= 24:
        raise OptionError(f"--hours-per-day must be in (0, 24], got {hours_per_day}")
    if not workdays or not set(workdays) <= set(range(7)):
        raise OptionError("working days must be weekday numbers 0 (Mon) to 6 (Sun)")
    dues = [j.due for j in jobs if j.due is not None]
    if until is None:
        until = max([start + timedelta(days=364), *dues])
    if until < start:
        raise OptionError(f"calendar end {until} is before its start {start}")
    for job in jobs:
        if not (math.isfinite(job.hours) and job.hours >= 0):
            raise OptionError(f"block {job.block!r}: hours must be a number >= 0, got {job.hours}")

    days = [start + timedelta(days=i) for i in range((until - start).days + 1)]
    days = [d for d in days if d.weekday() in workdays]
    ordinals = np.array([d.toordinal() for d in days], dtype=np.int64)
    day_minutes = int(round(hours_per_day * 60))
    free = np.full((len(days), len(names)), day_minutes, dtype=np.int64)
    placed: dict[tuple[int, int], list[tuple[str, int, int]]] = {}

    def priority(item: tuple[Job, int, date, date]) -> tuple:
        job, r, _, due = item
        target = job.target_date.toordinal() if job.target_date else math.inf
        prob = -job.probability if job.probability is not None and np.isfinite(job.probability) else math.inf
        return (due, target, prob, job.block, r)

    rounds = [(job, r, rel, due) for job in jobs for r, rel, due in _rounds(job, start=start, until=until)]
    unfitted = []
    for job, r, release, due in sorted(rounds, key=priority):
        need = int(math.ceil(job.hours * 60 - 1e-9))
        lo = int(np.searchsorted(ordinals, release.toordinal(), side="left"))
        hi = int(np.searchsorted(ordinals, due.toordinal(), side="right"))
        window = free[lo:hi]
        available = int(window.sum())
        if need > available:
            unfitted.append(
                {
                    "block": job.block,
                    "round": r,
                    "release": release.isoformat(),
                    "due": due.isoformat(),
                    "hours": job.hours,
                    "free_hours": available / 60,
                    "reason": "not enough free crew time on working days before the due date",
                }
            )
            continue
        if need == 0:
            continue
        flat = window.reshape(-1)  # day-major, then crew: earliest days first
        before = np.concatenate([[0], np.cumsum(flat)[:-1]])
        take = np.clip(need - before, 0, flat)
        for cell in np.flatnonzero(take):
            d_idx, c_idx = divmod(int(cell), len(names))
            placed.setdefault((lo + d_idx, c_idx), []).append((job.block, r, int(take[cell])))
        flat -= take
        free[lo:hi] = flat.reshape(window.shape)

    events = []
    for (d_idx, c_idx), items in sorted(placed.items()):
        used = sum(m for _, _, m in items)
        begin = datetime.combine(days[d_idx], day_start)
        events.append(
            CrewDay(
                day=days[d_idx],
                crew=names[c_idx],
                start=begin,
                end=begin + timedelta(minutes=used),
                items=tuple((b, r, m / 60) for b, r, m in items),
            )
        )
    return Schedule(events=tuple(events), unfitted=tuple(unfitted), start=start)


def block_hours(
    xy: np.ndarray,
    blocks: Sequence[str],
    *,
    row_bearing_deg: np.ndarray | None = None,
    walk_kmh: float = 4.0,
    minutes_per_point: float = 5.0,
    across_factor: float = 1.5,
) -> dict[str, float]:
    """Crew-hours to sample each block once: a short walk through its points plus handling.

    The walk is an open path through the block's points (2-opt + Or-opt, no
    kicks) on the row-aware metric; walking to and from the block is not
    counted. Walking speed 4 km/h and 5 min per point by default (common
    practice, no source).
    """
    from fieldplan.route.metric import Metric
    from fieldplan.route.tsp import route_cost, solve_route

    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    names = np.asarray(blocks, dtype=object).astype(str)
    bearing = np.full(len(xy), np.nan) if row_bearing_deg is None else np.asarray(row_bearing_deg, float)
    out: dict[str, float] = {}
    for name in sorted(set(names.tolist())):
        idx = np.flatnonzero(names == name)
        metric = Metric(
            xy[idx],
            group=np.zeros(len(idx), dtype=np.int64),
            bearing_deg=bearing[idx],
            across_factor=across_factor,
        )
        order = solve_route(metric, rng=np.random.default_rng(0), closed=False, kicks=0)
        walk = route_cost(metric, order, closed=False) / (walk_kmh * 1000.0)
        out[name] = walk + len(idx) * minutes_per_point / 60.0
    return out


def to_icalendar(schedule: Schedule, *, title: str = "fieldplan sampling") -> str:
    """RFC 5545 iCalendar text: one VEVENT per crew working day.

    Parameters
    ----------
    schedule : Schedule
        From :func:`make_schedule`.
    title : str
        Calendar name (X-WR-CALNAME) and event summary prefix.

    Returns
    -------
    str
        CRLF-separated iCalendar text.
    """
    from icalendar import Calendar, Event

    cal = Calendar()
    cal.add("prodid", "-//fieldplan//sampling schedule//EN")
    cal.add("version", "2.0")
    cal.add("calscale", "GREGORIAN")
    cal.add("x-wr-calname", title)
    stamp = datetime.combine(schedule.start or date(1970, 1, 1), time(0), tzinfo=UTC)
    for ev in schedule.events:
        blocks = list(dict.fromkeys(b for b, _, _ in ev.items))
        key = f"{ev.day.isoformat()}|{ev.crew}".encode()
        event = Event()
        event.add("uid", hashlib.sha256(key).hexdigest()[:32] + "@fieldplan")
        event.add("dtstamp", stamp)
        event.add("dtstart", ev.start)
        event.add("dtend", ev.end)
        event.add("summary", f"{title}: {ev.crew}: {', '.join(blocks)}")
        event.add("description", "\n".join(f"{b} (round {r}): {h:.2f} h" for b, r, h in ev.items))
        cal.add_component(event)
    return cal.to_ical().decode("utf-8")
