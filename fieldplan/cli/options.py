"""Shared CLI pieces: error handling, progress, common options and output of notes."""

from __future__ import annotations

import functools
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Annotated

import typer

__all__ = [
    "handle_errors",
    "mark_complete",
    "is_complete",
    "progress_callback",
    "echo_err",
    "Force",
    "report_replaced",
    "Seed",
    "Quiet",
    "parse_lonlat",
]

Force = Annotated[bool, typer.Option("--force", help="Replace an existing plan folder.")]
Seed = Annotated[
    int,
    typer.Option("--seed", min=0, help="Seed for every random choice; same inputs + seed = same plan."),
]
Quiet = Annotated[bool, typer.Option("--quiet", "-q", help="Print only errors.")]


# Set by a command once every file it wrote is complete, closed and synced (see mark_complete).
_complete = False


def mark_complete() -> None:
    """Note that the command's work is all on disk: the console script may then end the process
    without the interpreter's teardown (:func:`fieldplan.cli.main.run`)."""
    global _complete
    _complete = True


def is_complete() -> bool:
    """Whether :func:`mark_complete` was called in this process."""
    return _complete


def echo_err(message: str) -> None:
    """Print a one-line message to stderr."""
    typer.echo(message, err=True)


def handle_errors(func: Callable) -> Callable:
    """Turn fieldplan errors into one line on stderr and exit code 2, never a traceback."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        from fieldplan.errors import FieldplanError

        try:
            return func(*args, **kwargs)
        except FieldplanError as err:
            echo_err(f"fieldplan: error: {' '.join(str(err).split())}")
            raise typer.Exit(2) from None
        except KeyboardInterrupt:
            echo_err("fieldplan: interrupted; nothing was written")
            raise typer.Exit(130) from None
        except (PermissionError, IsADirectoryError, NotADirectoryError) as err:
            echo_err(
                f"fieldplan: error: {err.filename or ''}: {err.strerror}; check the path and permissions"
            )
            raise typer.Exit(2) from None

    return wrapper


@contextmanager
def progress_callback(label: str, *, quiet: bool = False) -> Iterator[Callable[[int, int], None] | None]:
    """A ``(done, total)`` callback drawing a progress bar on a terminal; ``None`` otherwise."""
    if quiet or not sys.stderr.isatty():
        yield None
        return
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    with Progress(
        TextColumn(label),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        transient=True,
        console=__import__("rich.console", fromlist=["Console"]).Console(stderr=True),
    ) as bar:
        task = bar.add_task(label, total=None)

        def update(done: int, total: int) -> None:
            bar.update(task, completed=done, total=total)

        yield update


def parse_lonlat(text: str) -> tuple[float, float]:
    """Parse ``"LON,LAT"`` into floats, with a clear error."""
    from fieldplan.errors import OptionError

    try:
        lon, lat = (float(part) for part in text.split(","))
    except ValueError:
        raise OptionError(f"expected LON,LAT in decimal degrees, e.g. 18.85,-33.92; got {text!r}") from None
    if not (-180 <= lon <= 180 and -90 <= lat <= 90):
        raise OptionError(f"{text!r} is not a longitude,latitude pair (longitude first)")
    return lon, lat


def report_replaced(meta: dict, out) -> None:
    """Say where a replaced plan holding history was moved (``previous_plan`` in the manifest)."""
    from pathlib import Path

    aside = meta.get("previous_plan")
    if aside:
        echo_err(
            f"note: {out}: the plan it replaced held results or field records; it was moved to "
            f"{Path(out).parent / aside}, not deleted (--discard-history deletes it instead)"
        )
