"""The ``fieldplan`` command: a typer group; each subcommand lives in its own module."""

from __future__ import annotations

from typing import Annotated

import typer

from fieldplan import __version__

app = typer.Typer(
    name="fieldplan",
    help="Plan where and how to take samples in fields, vineyards and orchards.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
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


from fieldplan.cli import demo_cmd, plan_cmd  # noqa: E402

plan_cmd.register(app)
demo_cmd.register(app)
from fieldplan.cli import size_cmd  # noqa: E402

size_cmd.register(app)
from fieldplan.cli import results_cmd  # noqa: E402

results_cmd.register(app)
from fieldplan.cli import estimate_cmd  # noqa: E402

estimate_cmd.register(app)
from fieldplan.cli import labels_cmd  # noqa: E402

labels_cmd.register(app)
from fieldplan.cli import lab_cmd  # noqa: E402

lab_cmd.register(app)
from fieldplan.cli import mark_cmd  # noqa: E402

mark_cmd.register(app)
from fieldplan.cli import check_cmd  # noqa: E402

check_cmd.register(app)
from fieldplan.cli import crews_cmd  # noqa: E402

crews_cmd.register(app)
from fieldplan.cli import schedule_cmd  # noqa: E402

schedule_cmd.register(app)


def run() -> None:
    """Console-script entry point."""
    app()
