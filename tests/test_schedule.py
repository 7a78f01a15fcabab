"""Sampling calendar and its iCalendar export."""

from __future__ import annotations

from collections import defaultdict
from datetime import date, datetime

import icalendar
import pytest

from fieldplan.errors import OptionError
from fieldplan.schedule import (
    Job,
    add_interval,
    make_schedule,
    parse_interval,
    parse_workdays,
    to_icalendar,
)

START = date(2026, 3, 2)  # a Monday


def _jobs():
    return [
        Job("B01", 5.5, every="7d"),
        Job("B02", 9.0, every="7d"),
        Job("B03", 30.0, due=date(2026, 3, 13)),
        Job("B04", 400.0, due=date(2026, 3, 6)),  # cannot fit
        Job("B05", 2.0, every="1y"),
    ]


def test_ics_parses_and_respects_days_and_hours():
    sched = make_schedule(
        _jobs(),
        crews=2,
        hours_per_day=7.5,
        start=START,
        until=date(2026, 4, 30),
        workdays=parse_workdays("mon-fri"),
    )
    text = to_icalendar(sched)
    # reference: RFC 5545 section 3.1 (lines end in CRLF) and 3.4 (VCALENDAR object)
    assert text.startswith("BEGIN:VCALENDAR\r\n") and text.endswith("END:VCALENDAR\r\n")
    cal = icalendar.Calendar.from_ical(text)  # reference: icalendar (PyPI) parser
    events = list(cal.walk("VEVENT"))
    assert len(events) == len(sched.events) > 0
    per_crew_day = defaultdict(float)
    uids = set()
    for ev in events:
        start, end = ev.decoded("dtstart"), ev.decoded("dtend")
        assert isinstance(start, datetime)
        # each event on an allowed working day (Mon-Fri: weekday() 0..4)
        assert start.weekday() < 5
        assert start.date() == end.date()
        per_crew_day[(start.date(), str(ev["summary"]).split(": ")[1])] += (
            end - start
        ).total_seconds() / 3600
        # reference: RFC 5545 section 3.6.1, UID and DTSTAMP are required in VEVENT
        assert ev.get("uid") and ev.get("dtstamp")
        uids.add(str(ev["uid"]))
    assert len(uids) == len(events)
    # no crew-day exceeds its hours
    assert max(per_crew_day.values()) <= 7.5 + 1e-9
    rows = sched.rows()
    assert rows.groupby(["date", "crew"])["hours"].sum().max() <= 7.5 + 1e-9


def test_unfitted_reported_and_not_placed():
    sched = make_schedule(_jobs(), crews=2, hours_per_day=8, start=START, until=date(2026, 3, 31))
    bad = sched.unfitted_rows()
    assert bad["block"].tolist() == ["B04"]
    # 5 working days x 2 crews x 8 h = 80 h free before 6 March, minus B01/B02 week 1
    assert bad["free_hours"].iloc[0] <= 80
    assert "B04" not in set(sched.rows()["block"])


def test_every_round_fully_placed_before_due():
    sched = make_schedule(_jobs(), crews=2, hours_per_day=8, start=START, until=date(2026, 3, 31))
    rows = sched.rows()
    hours = rows.groupby(["block", "round"])["hours"].sum()
    # 7-day rounds within March: released 2, 9, 16, 23, 30 March
    assert sorted(rows.loc[rows.block == "B01", "round"].unique()) == [1, 2, 3, 4, 5]
    assert hours[("B01", 1)] == pytest.approx(5.5) and hours[("B03", 1)] == pytest.approx(30)
    week2 = rows[(rows.block == "B02") & (rows["round"] == 2)]
    assert week2["date"].min() >= "2026-03-09" and week2["date"].max() <= "2026-03-15"


def test_readiness_orders_blocks_due_together():
    jobs = [
        Job("A", 8, every="7d", probability=0.1),
        Job("B", 8, every="7d", probability=0.9),
        Job("C", 8, every="7d", target_date=date(2026, 3, 20)),
    ]
    sched = make_schedule(jobs, crews=1, hours_per_day=8, start=START, until=date(2026, 3, 8))
    first = sched.rows().groupby("block")["date"].min().sort_values()
    # documented rule: projected date first, then higher probability
    assert first.index.tolist() == ["C", "B", "A"]


def test_deterministic_bytes():
    a = to_icalendar(make_schedule(_jobs(), crews=3, hours_per_day=8, start=START))
    b = to_icalendar(make_schedule(_jobs(), crews=3, hours_per_day=8, start=START))
    assert a == b


def test_intervals_and_days():
    assert parse_interval("7d") == (7, "d") and parse_interval(" 1Y ") == (1, "y")
    # reference: Gregorian calendar, 31 Jan + 1 month clamps to 28 Feb in 2026 (not leap)
    assert add_interval(date(2026, 1, 31), 1, "m") == date(2026, 2, 28)
    assert add_interval(date(2024, 2, 29), 1, "y") == date(2025, 2, 28)
    assert parse_workdays("mon-fri") == frozenset(range(5))
    assert parse_workdays("fri-mon") == frozenset({4, 5, 6, 0})
    assert parse_workdays("mon,wed,fri") == frozenset({0, 2, 4})
    for bad in ("7", "0d", "3x"):
        with pytest.raises(OptionError, match="7d"):
            parse_interval(bad)
    with pytest.raises(OptionError, match="mon-fri"):
        parse_workdays("funday")


def test_weekend_only_calendar():
    sched = make_schedule(
        [Job("B01", 20, every="7d")],
        crews=["North", "South"],
        hours_per_day=6,
        start=START,
        until=date(2026, 3, 29),
        workdays=parse_workdays("sat,sun"),
    )
    days = {e.day.weekday() for e in sched.events}
    assert days <= {5, 6} and {e.crew for e in sched.events} == {"North", "South"}
    assert not sched.unfitted
