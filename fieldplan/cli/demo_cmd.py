"""``fieldplan demo``: plan the bundled invented estate."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Force, Quiet, handle_errors, progress_callback

__all__ = ["register", "demo"]


@handle_errors
def demo(
    out: Annotated[Path, typer.Option("--out", "-o", help="Folder to write the demo plan into.")],
    seed: Annotated[int | None, typer.Option(min=0, help="Seed (default 7).")] = None,
    force: Force = False,
    quiet: Quiet = False,
) -> None:
    """Plan the invented demo estate (Tallowmere Estate): 40 m grid, 8 m headland."""
    from fieldplan.cli.plan_cmd import report
    from fieldplan.demo import make_demo_plan
    from fieldplan.store import write_plan
    from fieldplan.write.safe import staged_folder

    if out.is_dir() and any(out.iterdir()) and not force:
        with staged_folder(out, force=False):
            pass
    with progress_callback("Planning demo blocks", quiet=quiet) as progress:
        result = make_demo_plan(seed=seed, progress=progress, command=["fieldplan", *sys.argv[1:]])
    write_plan(result, out, force=force)
    if not quiet:
        report(result, out)


def register(app: typer.Typer) -> None:
    app.command("demo")(demo)
