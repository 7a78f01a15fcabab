"""``fieldplan schedule``: a sampling calendar of crew days, as CSV and iCalendar."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Quiet, echo_err, handle_errors
from fieldplan.words import plural

__all__ = ["register", "schedule"]

_BLOCK_COLUMNS = ("block", "hours", "due", "every", "probability", "target_date")


def _date(text: str | None, what: str):
    from datetime import date

    from fieldplan.errors import OptionError

    if text is None or str(text).strip() in ("", "nan", "NaT", "None"):
        return None
    try:
        return date.fromisoformat(str(text).strip()[:10])
    except ValueError:
        raise OptionError(f"{what}: {text!r} is not a date; use YYYY-MM-DD") from None


def _block_table(path: Path):
    """Per-block settings from a CSV: block, and any of hours, due, every, probability, target_date."""
    import pandas as pd

    from fieldplan.errors import InputError

    try:
        table = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, ValueError) as err:
        raise InputError(f"{path}: cannot read the block table ({err})") from None
    table.columns = [c.strip().lower() for c in table.columns]
    if "block" not in table.columns:
        raise InputError(f"{path}: needs a 'block' column (and any of {', '.join(_BLOCK_COLUMNS[1:])})")
    return {str(r["block"]): r for r in table.to_dict("records")}


def _readiness(plan_dir: Path) -> dict[str, dict]:
    """Block readiness from estimates.csv ('fieldplan estimate --group-by block --target ...')."""
    import pandas as pd

    path = plan_dir / "estimates.csv"
    if not path.is_file():
        return {}
    table = pd.read_csv(path, dtype=str, keep_default_na=False)
    if "group" not in table.columns or "by" not in table.columns:
        return {}
    table = table[table["by"] == "block"]
    out = {}
    for row in table.to_dict("records"):
        out[str(row["group"]).lstrip("'")] = {
            "probability": row.get("p_reached", ""),
            "target_date": row.get("target_date", ""),
        }
    return out


def _float(text, what: str) -> float | None:
    from fieldplan.errors import OptionError

    if text is None or str(text).strip() in ("", "nan"):
        return None
    try:
        return float(text)
    except ValueError:
        raise OptionError(f"{what}: {text!r} is not a number") from None


@handle_errors
def schedule(
    plan_dir: Annotated[Path, typer.Argument(help="Plan folder made by 'fieldplan plan'.")],
    start: Annotated[str, typer.Option("--first-day", help="First day, YYYY-MM-DD.")],
    n_crews: Annotated[int, typer.Option("--crews", min=1, help="Crews available each day.")] = 1,
    hours_per_day: Annotated[
        float, typer.Option("--hours-per-day", min=0.5, max=24, help="Working hours per crew and day.")
    ] = 8.0,
    days: Annotated[
        str, typer.Option("--days", help="Working days, e.g. mon-fri or mon,wed,fri.")
    ] = "mon-fri",
    until: Annotated[
        str | None, typer.Option("--until", help="Last day, YYYY-MM-DD (default: one year on).")
    ] = None,
    every: Annotated[
        str | None, typer.Option("--every", help="Repeat every block, e.g. 7d, 2w, 1m, 1y.")
    ] = None,
    due: Annotated[
        str | None, typer.Option("--due", help="Date every block must be done by, YYYY-MM-DD.")
    ] = None,
    blocks_file: Annotated[
        Path | None,
        typer.Option("--blocks", help="CSV per block: block, hours, due, every, probability, target_date."),
    ] = None,
    walk_speed: Annotated[float, typer.Option("--walk-speed", min=0.1, help="km/h.")] = 4.0,
    minutes_per_point: Annotated[
        float, typer.Option("--minutes-per-point", min=0.0, help="Minutes at each point.")
    ] = 5.0,
    force: Annotated[
        bool, typer.Option("--force", help="Replace the schedule (schedule.csv, schedule.ics) already in the plan folder.")
    ] = False,
    quiet: Quiet = False,
) -> None:
    """Place block sampling rounds on crew working days; write schedule.csv and schedule.ics.

    Hours per block come from a short walk through its points plus handling
    time, unless the --blocks table gives them. Rounds due together go to the
    blocks closest to their target first when readiness is known (probability
    or projected date in --blocks, or estimates.csv from 'fieldplan estimate
    --group-by block --target ...').
    """
    import shapely

    from fieldplan.errors import OutputExistsError
    from fieldplan.schedule import Job, block_hours, make_schedule, parse_workdays, to_icalendar
    from fieldplan.store import load_plan
    from fieldplan.write.safe import atomic_write_text, neutralise_frame

    plan_dir = Path(plan_dir)
    plan = load_plan(plan_dir)
    if (plan_dir / "schedule.ics").exists() and not force:
        raise OutputExistsError(f"{plan_dir}: schedule.ics exists; add --force to replace it")
    first = _date(start, "--first-day")
    last = _date(until, "--until")
    due_all = _date(due, "--due")
    workdays = parse_workdays(days)

    points = plan.points
    bearing_by_block = {}
    if "row_bearing_deg" in plan.blocks.columns:
        bearing_by_block = dict(
            zip(plan.blocks["block"].astype(str), plan.blocks["row_bearing_deg"].astype(float), strict=True)
        )
    names = points["block"].astype(str).tolist()
    hours = block_hours(
        shapely.get_coordinates(points.geometry.values),
        names,
        row_bearing_deg=[bearing_by_block.get(b, float("nan")) for b in names],
        walk_kmh=walk_speed,
        minutes_per_point=minutes_per_point,
    )
    settings = _block_table(blocks_file) if blocks_file is not None else {}
    ready = _readiness(plan_dir)
    jobs = []
    for block in sorted(hours):
        row = {**ready.get(block, {}), **{k: v for k, v in settings.get(block, {}).items() if v != ""}}
        prob = _float(row.get("probability"), f"block {block} probability")
        jobs.append(
            Job(
                block=block,
                hours=_float(row.get("hours"), f"block {block} hours") or hours[block],
                due=_date(row.get("due"), f"block {block} due") or due_all,
                every=row.get("every") or every,
                probability=prob,
                target_date=_date(row.get("target_date"), f"block {block} target_date"),
            )
        )
    result = make_schedule(
        jobs, crews=n_crews, hours_per_day=hours_per_day, start=first, until=last, workdays=workdays
    )
    rows = result.rows()
    atomic_write_text(
        plan_dir / "schedule.csv",
        neutralise_frame(rows).to_csv(index=False, float_format="%.2f", lineterminator="\n"),
    )
    atomic_write_text(plan_dir / "schedule.ics", to_icalendar(result))
    unfitted_path = plan_dir / "schedule_unfitted.csv"
    bad = result.unfitted_rows()
    if len(bad):
        atomic_write_text(
            unfitted_path, neutralise_frame(bad).to_csv(index=False, float_format="%.2f", lineterminator="\n")
        )
        listed = ", ".join(f"{b} round {r}" for b, r in zip(bad["block"], bad["round"], strict=True))
        echo_err(
            f"{len(bad)} block round(s) do not fit before their due date: {listed[:300]} "
            f"(see {unfitted_path}); add crews, days or hours"
        )
    elif unfitted_path.exists():
        unfitted_path.unlink()
    if not quiet:
        n_days = rows[["date", "crew"]].drop_duplicates().shape[0] if len(rows) else 0
        typer.echo(
            f"{plural(len(jobs), 'block')}, {rows['hours'].sum():.1f} crew-hours on {plural(n_days, 'crew-day')} "
            f"-> {plan_dir / 'schedule.ics'}, {plan_dir / 'schedule.csv'}"
        )


def register(app: typer.Typer) -> None:
    app.command("schedule")(schedule)
