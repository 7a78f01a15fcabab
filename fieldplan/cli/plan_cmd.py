"""``fieldplan plan``: read blocks, run a design, write the plan folder.

The options are made from the plan specification (:mod:`fieldplan.spec`): one
flag per parameter, with the spec's type, choices (typos fail before any file
is read, listing the valid ones), default, help text and help panel. A new
parameter or design in the spec is a new option here with no change to this
file. Former flag names stay accepted, hidden, for one release (the spec's
``aliases``). ``plan()`` itself only builds the spec, then reads, plans, writes
and reports (:func:`run_plan`).
"""

from __future__ import annotations

import enum
import inspect
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from fieldplan.cli.options import echo_err, handle_errors, mark_complete, progress_callback, report_replaced

if TYPE_CHECKING:
    from fieldplan.planning.plan import Plan
    from fieldplan.spec import PlanSpec

__all__ = ["register", "plan", "run_plan", "build_spec"]

_ALIAS = "alias__"
_METAVAR = {
    "number": "X",
    "integer": "N",
    "string": "TEXT",
    "path": "FILE",
    "angle": "DEG|rows",
    "list": "A,B",
    "mapping": "ROLE=FIELD",
    "choice": "NAME",
}
_TYPES: dict[str, Any] = {"number": float, "integer": int, "string": str, "path": str, "angle": str, "list": str}


def _choice_type(name: str, choices: tuple[str, ...]) -> type[enum.Enum]:
    # A str Enum: click checks the choice while parsing, before any file is read.
    return enum.Enum(f"{name.title().replace('_', '')}Choice", {c: c for c in choices}, type=str)  # type: ignore[return-value]


def _option_for(name: str, *, flag: str | None = None, hidden: bool = False) -> inspect.Parameter:
    """The typer option of spec parameter ``name`` (or a hidden former flag of it)."""
    from fieldplan.spec import PANELS, flag_of, help_text, param_info

    info = param_info(name)
    kind = info["kind"]
    shown = info["effective_default"]
    # The default shown is the spec's; only options typed are used (see build_spec).
    if isinstance(shown, list):
        shown = ",".join(shown)
    show = shown not in (None, "", {})
    panel = PANELS[info["panel"]]
    decl = flag or flag_of(name)
    helptext = help_text(name, flag_of) if not hidden else f"Former name of {flag_of(name)}."
    if kind == "boolean":
        option = typer.Option(decl, help=helptext, rich_help_panel=panel, hidden=hidden)
        annotation: Any = Annotated[bool, option]
        default: Any = False
    else:
        if kind == "choice":
            base: Any = _choice_type(name, tuple(info["choices"]))
        elif kind == "mapping":
            base = list[str]
        else:
            base = _TYPES[kind]
        option = typer.Option(
            decl,
            help=helptext,
            rich_help_panel=panel,
            metavar=_METAVAR[kind],
            show_default=show and not hidden,
            case_sensitive=False,
            hidden=hidden,
        )
        annotation = Annotated[base | None, option]
        default = None if not show or kind == "mapping" else shown
    python_name = _ALIAS + name if hidden else name
    return inspect.Parameter(python_name, inspect.Parameter.KEYWORD_ONLY, default=default, annotation=annotation)


def _fixed_parameters() -> list[inspect.Parameter]:
    """Options that are not plan parameters: files, recipe, seed, run control."""
    from fieldplan.spec import PANELS

    kw = inspect.Parameter.KEYWORD_ONLY
    io, grid, outputs = PANELS["input"], PANELS["grid"], PANELS["outputs"]
    return [
        inspect.Parameter("ctx", inspect.Parameter.POSITIONAL_OR_KEYWORD, annotation=typer.Context),
        inspect.Parameter(
            "blocks_file",
            inspect.Parameter.POSITIONAL_OR_KEYWORD,
            annotation=Annotated[
                Path,
                typer.Argument(
                    help="Block boundaries: GeoJSON, GeoPackage, Shapefile (or zipped), KML or KMZ.",
                    metavar="BLOCKS",
                    show_default=False,
                ),
            ],
        ),
        inspect.Parameter(
            "out",
            kw,
            annotation=Annotated[
                Path,
                typer.Option("--out", "-o", help="Folder to write the plan into.", metavar="DIR", rich_help_panel=outputs),
            ],
        ),
        inspect.Parameter(
            "recipe",
            kw,
            default=None,
            annotation=Annotated[
                Path | None,
                typer.Option(
                    "--recipe",
                    help="TOML recipe of the plan's parameters (see 'fieldplan recipe'); flags given here win.",
                    metavar="FILE",
                    rich_help_panel=io,
                ),
            ],
        ),
        inspect.Parameter(
            "like",
            kw,
            default=None,
            annotation=Annotated[
                Path | None,
                typer.Option(
                    "--like",
                    help="Plan like an earlier plan folder: its parameters, a new seed unless --seed.",
                    metavar="DIR",
                    rich_help_panel=io,
                ),
            ],
        ),
        inspect.Parameter(
            "seed",
            kw,
            default=0,
            annotation=Annotated[
                int,
                typer.Option(
                    "--seed",
                    min=0,
                    help="Seed of every random choice; same inputs + seed = same plan.",
                    metavar="N",
                    rich_help_panel=grid,
                ),
            ],
        ),
        inspect.Parameter(
            "force",
            kw,
            default=False,
            annotation=Annotated[
                bool, typer.Option("--force", help="Replace an existing plan folder.", rich_help_panel=outputs)
            ],
        ),
        inspect.Parameter(
            "discard_history",
            kw,
            default=False,
            annotation=Annotated[
                bool,
                typer.Option(
                    "--discard-history",
                    help="With --force: delete a replaced plan holding results, events, positions, crews or "
                    "lab sheets (otherwise it is moved aside to NAME.replaced-<time>).",
                    rich_help_panel=outputs,
                ),
            ],
        ),
        inspect.Parameter(
            "quiet",
            kw,
            default=False,
            annotation=Annotated[bool, typer.Option("--quiet", "-q", help="Print only errors.", rich_help_panel=outputs)],
        ),
    ]


def _signature() -> inspect.Signature:
    from fieldplan.spec import PANELS, param_info, params_in_panel

    fixed = _fixed_parameters()
    params = fixed[:2]  # the context and the blocks file
    for panel in PANELS:
        # Panels appear in help in the order of their first option.
        params.extend(p for p in fixed[2:] if _panel_of(p) == PANELS[panel])
        for name in params_in_panel(panel):
            params.append(_option_for(name))
            params.extend(_option_for(name, flag=alias, hidden=True) for alias in param_info(name)["aliases"])
    return inspect.Signature(params)


def _panel_of(param: inspect.Parameter) -> str | None:
    option = next(a for a in param.annotation.__metadata__ if isinstance(a, typer.models.OptionInfo))
    return option.rich_help_panel


def _typed(ctx: typer.Context, name: str) -> bool:
    """Whether option ``name`` was given on the command line (or in the environment)."""
    # By name: typer may carry its own copy of click's ParameterSource enum.
    source = ctx.get_parameter_source(name)
    return getattr(source, "name", None) in ("COMMANDLINE", "ENVIRONMENT")


def _plain(value: Any) -> Any:
    if isinstance(value, enum.Enum):
        return value.value
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    return value


def build_spec(
    ctx: typer.Context, values: dict[str, Any], *, recipe: Path | None, like: Path | None, seed: int | None
) -> tuple[PlanSpec, int]:
    """The spec and seed from a recipe or earlier plan, overridden by the flags typed."""
    from fieldplan.errors import OptionError
    from fieldplan.spec import flag_of

    given: dict[str, Any] = {}
    for key, value in values.items():
        name = key.removeprefix(_ALIAS)
        if not _typed(ctx, key):
            continue
        if key.startswith(_ALIAS):
            old = next(o.opts[0] for o in ctx.command.params if o.name == key)
            if name in given and given[name] != _plain(value):
                raise OptionError(f"give {flag_of(name)} only ({old} is its former name)")
            echo_err(f"note: {old} is now {flag_of(name)}; the former name goes in the next release")
        elif name in given and given[name] != _plain(value):
            raise OptionError(f"give {flag_of(name)} only (its former name was given too)")
        given[name] = _plain(value)
    return _spec_and_seed(given, recipe=recipe, like=like, seed=seed if _typed(ctx, "seed") else None)


def _plan(
    ctx: typer.Context,
    blocks_file: Path,
    *,
    out: Path,
    recipe: Path | None = None,
    like: Path | None = None,
    seed: int | None = None,
    force: bool = False,
    discard_history: bool = False,
    quiet: bool = False,
    **values: Any,
) -> None:
    """Plan sample points over block boundaries and write them to a folder.

    Example: fieldplan plan blocks.geojson --spacing 40 --edge-buffer 8 --seed 7 --out plan-2027
    """
    from fieldplan.errors import DesignError, OptionError
    from fieldplan.spec import SpecDesignError, SpecError, flag_of

    try:
        spec, seed = build_spec(ctx, values, recipe=recipe, like=like, seed=seed)
        run_plan(
            blocks_file, spec, out=out, seed=seed, force=force, quiet=quiet, discard_history=discard_history
        )
        mark_complete()  # the plan folder is written, synced and swapped into place
    except SpecError as err:
        # The library names parameters; here they are flags.
        raise OptionError(err.render(flag_of)) from None
    except SpecDesignError as err:
        raise DesignError(err.render(flag_of)) from None


def _command() -> Any:
    command = handle_errors(_plan)
    signature = _signature()
    command.__signature__ = signature
    command.__annotations__ = {p.name: p.annotation for p in signature.parameters.values()}
    return command


#: ``fieldplan plan`` as a function (its options are built from the spec).
plan = _command()


def _spec_and_seed(
    given: dict, *, recipe: Path | None, like: Path | None, seed: int | None
) -> tuple[PlanSpec, int]:
    """The spec from a recipe or earlier plan overridden by the flags given, and the seed to use."""
    from fieldplan.errors import OptionError
    from fieldplan.recipe import merge, plan_recipe, read_recipe
    from fieldplan.spec import PlanSpec

    if recipe is not None and like is not None:
        raise OptionError("give --recipe or --like, not both")
    base: dict = {}
    base_seed = None
    revisit = given.get("revisit")
    if recipe is not None:
        base, base_seed = read_recipe(recipe)
    elif like is not None or revisit is not None:
        # A revisit plans with the earlier plan's parameters, as --like does.
        base, _ = plan_recipe(like if like is not None else revisit)
        like = like if like is not None else Path(revisit)
    spec = PlanSpec.from_dict(merge(base, given))
    if seed is None:
        seed = base_seed
    if seed is None and like is not None:
        import secrets

        # A plan like another is a new draw: same design, different points.
        seed = secrets.randbelow(1_000_000)
        echo_err(f"note: new seed {seed} (give --seed to choose one)")
    return spec, (0 if seed is None else seed)


def run_plan(
    blocks_file: Path,
    spec: PlanSpec,
    *,
    out: Path,
    seed: int,
    force: bool,
    quiet: bool,
    discard_history: bool = False,
) -> Plan:
    """Check the output folder and resources, read, plan, write and report one spec."""
    from fieldplan.planning.engine import check_engine
    from fieldplan.planning.plan import make_plan
    from fieldplan.planning.stratum_designs import read_rows
    from fieldplan.read import read_blocks, read_exclusions, select_blocks
    from fieldplan.safety import load_cautions, set_cautions
    from fieldplan.samples.purpose import check_samples
    from fieldplan.store import write_plan
    from fieldplan.write.safe import check_out_dir

    # Fail on an occupied folder (or, with --force, a folder that is not a plan) before any work.
    check_out_dir(out, force=force)
    cautions = Path(spec.outputs.cautions) if spec.outputs.cautions else None
    if cautions is not None:
        load_cautions(cautions)  # a bad cautions file fails before any work
    check_samples(spec.samples)  # a missing crop profile fails before any work
    check_engine(spec.scale.engine, spec.scale.scheduler)  # a missing dask fails before any work
    previous = None
    read_options = {
        **spec.input.read_options(),
        "crop_profile": spec.samples.crop_profile,
        "max_blocks": spec.scale.max_blocks,
        "overlaps": spec.input.overlaps,
    }
    if spec.input.revisit:
        from fieldplan.store import load_plan

        previous = load_plan(spec.input.revisit)
        read_options["crs"] = previous.crs  # the earlier sites' own CRS: coordinates unchanged
    blocks = read_blocks(blocks_file, **read_options)
    if spec.input.select is not None:
        blocks = select_blocks(blocks, spec.input.select)
    exclusions = read_exclusions(spec.input.exclude, crs=blocks.crs) if spec.input.exclude else None
    if exclusions is not None and exclusions.attrs.get("notes"):
        blocks.attrs["notes"] = [*blocks.attrs.get("notes", []), *exclusions.attrs["notes"]]
    rows = read_rows(spec.clusters.rows, crs=blocks.crs) if spec.clusters.rows else None
    with progress_callback("Planning blocks", quiet=quiet) as progress:
        result = make_plan(
            blocks,
            spec,
            seed=seed,
            exclusions=exclusions,
            rows=rows,
            command=["fieldplan", *sys.argv[1:]],
            progress=progress,
            previous=previous,
        )
    set_cautions(result, cautions)
    write_plan(
        result, out, force=force, formats=list(spec.outputs.formats), discard_history=discard_history
    )
    report_replaced(result.meta, out)
    if not quiet:
        report(result, out)
    return result


def report(result: Plan, out: Path) -> None:
    """Print what was planned, notes and flags, and the cautions."""
    from fieldplan.safety import cautions_text, plan_cautions
    from fieldplan.words import plural

    for note in result.meta.get("notes", []):
        echo_err(f"note: {note}")
    flagged = result.blocks[result.blocks["flags"] != ""]
    for row in flagged.itertuples(index=False):
        echo_err(f"note: block {row.block}: {row.flags}")
    n_spare = int(result.points["status"].eq("spare").sum()) if "status" in result.points.columns else 0
    typer.echo(
        f"Planned {plural(len(result.points) - n_spare, 'point')}"
        + (f" and {plural(n_spare, 'spare')}" if n_spare else "")
        + f" in {plural(len(result.blocks), 'block')} "
        f"({result.params.get('design')}, seed {result.params.get('seed')}) -> {out}"
    )
    if (out / "map.html").exists():
        typer.echo(f"Map: {(out / 'map.html').resolve()}")
    typer.echo("Before going out:\n" + cautions_text(plan_cautions(result)))


class _PanelCommand(typer.core.TyperCommand):
    """The plan command's help in rich panels whatever the app's markup mode.

    Its options are many; the panels group them. Metavars are kept short so the
    option names stay whole at 80 columns (tests/test_spec_cli.py checks it).
    """

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self.rich_markup_mode = "rich"

    def parse_args(self, ctx: typer.Context, args: list[str]) -> list[str]:
        # Former spellings of choices (the spec's former_values), before click checks them.
        from fieldplan.spec import flag_of, spec_schema

        former = {flag_of(f["name"]): f["former_values"] for f in spec_schema()["fields"] if f["former_values"]}
        out = list(args)
        for i, arg in enumerate(out[:-1]):
            values = former.get(arg)
            if values and out[i + 1].lower() in values:
                new = values[out[i + 1].lower()]
                echo_err(f"note: {arg} {out[i + 1]} is now {arg} {new}; the former value goes in the next release")
                out[i + 1] = new
        return super().parse_args(ctx, out)


def register(app: typer.Typer) -> None:
    app.command("plan", cls=_PanelCommand)(plan)
