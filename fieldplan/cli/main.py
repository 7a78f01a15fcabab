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
    # Plain click help: rich's option tables cut long option names ("--plants-per-cl…") in
    # an 80-column terminal; click's formatter keeps every name whole and wraps the text.
    rich_markup_mode=None,
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


from fieldplan.cli import (  # noqa: E402
    check_cmd,
    crews_cmd,
    demo_cmd,
    estimate_cmd,
    field_records_cmd,
    lab_cmd,
    labels_cmd,
    mark_cmd,
    plan_cmd,
    recipe_cmd,
    results_cmd,
    schedule_cmd,
    serve_cmd,
    size_cmd,
    zones_cmd,
)

# The order here is the order of `fieldplan --help`: the working day from plan to estimate.
for _command in (
    zones_cmd,
    plan_cmd,
    recipe_cmd,
    demo_cmd,
    size_cmd,
    check_cmd,
    crews_cmd,
    schedule_cmd,
    mark_cmd,
    labels_cmd,
    lab_cmd,
    results_cmd,
    field_records_cmd,
    estimate_cmd,
    serve_cmd,
):
    _command.register(app)

# Former option names keep working, hidden, for one release (fieldplan.cli.renames).
from fieldplan.cli import renames as _renames  # noqa: E402

_renames.install(app)


def run() -> None:
    """Console-script entry point."""
    app()
