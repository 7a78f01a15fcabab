"""``fieldplan recipe``: print the recipe of an existing plan, to plan the same way again."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import handle_errors

__all__ = ["register", "recipe"]


@handle_errors
def recipe(
    plan_dir: Annotated[Path, typer.Argument(help="Plan folder made by 'fieldplan plan'.")],
    seed: Annotated[
        bool,
        typer.Option(
            "--seed/--no-seed",
            help="Keep the plan's seed (same points again) or leave it out (a new draw each time).",
        ),
    ] = True,
) -> None:
    """Print a plan's parameters as a TOML recipe.

    Example: fieldplan recipe plan-2026-soil > soil.toml, then next season
    fieldplan plan blocks-2027.geojson --recipe soil.toml --out plan-2027-soil
    """
    from fieldplan.recipe import recipe_for_plan

    typer.echo(recipe_for_plan(plan_dir, seed=seed), nl=False)


def register(app: typer.Typer) -> None:
    app.command("recipe")(recipe)
