"""The ``fieldplan`` command: a typer group; each subcommand lives in its own module.

Subcommands load lazily: the group knows only their names (:data:`COMMANDS`) until one
is invoked, and then imports that one module and builds that one click command. A run
of ``fieldplan plan`` so pays neither for importing the other fourteen modules nor for
typer turning their signatures into click options; ``fieldplan --help`` builds them all.
"""

from __future__ import annotations

import importlib
from collections.abc import Iterator, MutableMapping
from typing import Annotated, Any

import typer
import typer.core

from fieldplan import __version__

__all__ = ["app", "run", "COMMANDS"]

#: Subcommand name -> its module in ``fieldplan.cli`` (each has a ``register(app)``). The order
#: here is the order of ``fieldplan --help``: the working day from plan to estimate.
COMMANDS: dict[str, str] = {
    "zones": "zones_cmd",
    "plan": "plan_cmd",
    "recipe": "recipe_cmd",
    "demo": "demo_cmd",
    "size": "size_cmd",
    "check": "check_cmd",
    "crews": "crews_cmd",
    "schedule": "schedule_cmd",
    "mark": "mark_cmd",
    "labels": "labels_cmd",
    "lab-sheet": "lab_cmd",
    "results": "results_cmd",
    "field-records": "field_records_cmd",
    "estimate": "estimate_cmd",
    "serve": "serve_cmd",
}

# Plain click help: rich's option tables cut long option names ("--plants-per-cl…") in an
# 80-column terminal; click's formatter keeps every name whole and wraps the text.
_MARKUP: Any = None


def build_command(name: str) -> Any:
    """The click command of subcommand ``name``: its module imported, its options built.

    Raises
    ------
    KeyError
        When ``name`` is not a fieldplan subcommand.
    """
    from fieldplan.cli import renames

    module = importlib.import_module(f"fieldplan.cli.{COMMANDS[name]}")
    holder = typer.Typer(rich_markup_mode=_MARKUP, add_completion=False)
    module.register(holder)
    # Former option names keep working, hidden, for one release (fieldplan.cli.renames).
    renames.install(holder)
    (info,) = (i for i in holder.registered_commands if i.name == name)
    return typer.main.get_command_from_info(info, pretty_exceptions_short=True, rich_markup_mode=_MARKUP)


class _LazyCommands(MutableMapping):
    """The group's commands by name: each built on first look-up, names listed without building."""

    def __init__(self) -> None:
        self._built: dict[str, Any] = {}
        self._added: dict[str, Any] = {}

    def __getitem__(self, name: str) -> Any:
        if name in self._added:
            return self._added[name]
        if name not in self._built:
            if name not in COMMANDS:
                raise KeyError(name)
            self._built[name] = build_command(name)
        return self._built[name]

    def __setitem__(self, name: str, command: Any) -> None:
        self._added[name] = command

    def __delitem__(self, name: str) -> None:
        del self._added[name]

    def __iter__(self) -> Iterator[str]:
        yield from COMMANDS
        yield from (n for n in self._added if n not in COMMANDS)

    def __len__(self) -> int:
        return len(COMMANDS) + sum(n not in COMMANDS for n in self._added)

    def __contains__(self, name: object) -> bool:
        return name in COMMANDS or name in self._added


class LazyGroup(typer.core.TyperGroup):
    """A typer group whose subcommands are imported and built only when looked up."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self.commands = _LazyCommands()

    def list_commands(self, ctx: Any) -> list[str]:
        # Names only: typer's own list_commands would build every command to list them.
        return list(self.commands)


app = typer.Typer(
    name="fieldplan",
    cls=LazyGroup,
    help="Plan where and how to take samples in fields, vineyards and orchards.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=_MARKUP,
    context_settings={"max_content_width": 100},
)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"fieldplan {__version__}")
        raise typer.Exit()


@app.callback()
def main(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, help="Show the version.")
    ] = False,
) -> None:
    """Plan where and how to take samples in fields, vineyards and orchards."""
    import warnings

    # What GDAL says about a file reaches the user as fieldplan's own notes and errors
    # (a dropped Z, a skipped feature); its raw warnings would only add noise.
    warnings.filterwarnings("ignore", category=RuntimeWarning, module=r"pyogrio(\..*)?$")


def run() -> None:
    """Console-script entry point."""
    try:
        app()
    except SystemExit as done:
        if done.code in (0, None):
            _end_without_teardown()
        raise


def _end_without_teardown() -> None:
    """End a successful run now, skipping the interpreter's teardown of every module and object.

    Freeing the geometry stack at exit (numpy, pandas, shapely, pyproj, GDAL) takes about 70 ms,
    more than a small plan's own work. Done only when the command marked its work complete
    (:func:`fieldplan.cli.options.mark_complete`: every file written, closed and synced) and no
    other thread runs; exit handlers still run and the output streams are flushed first.
    Otherwise the process ends as usual.
    """
    import atexit
    import os
    import sys
    import threading

    from fieldplan.cli.options import is_complete

    run_exit_handlers = getattr(atexit, "_run_exitfuncs", None)
    if not is_complete() or run_exit_handlers is None or threading.active_count() != 1:
        return
    try:
        _flush(sys.stdout, sys.stderr)
    except (OSError, ValueError):
        return  # a closed pipe or stream: the usual exit reports it
    run_exit_handlers()
    try:
        _flush(sys.stdout, sys.stderr)
    except (OSError, ValueError):
        os._exit(120)  # what the interpreter returns when it cannot flush at exit
    os._exit(0)


def _flush(*streams: Any) -> None:
    for stream in streams:
        if stream is not None:
            stream.flush()
