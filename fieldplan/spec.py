"""One typed description of a plan, shared by the CLI, recipes, notebooks and the web.

A :class:`PlanSpec` holds every choice that makes a plan: the design and its
sample size, the grid, clusters of plants, the purpose of the samples, spares
and substitutes, how the blocks file is read and what is written. It checks
itself when built; a wrong value raises :class:`SpecError`, whose ``param`` is
the parameter's name (``spacing``, ``per_block``...), so the command line can
name its flag (``--spacing``) and a web form its field.

The sections are frozen dataclasses rather than pydantic models: they need no
new dependency, import nothing outside the standard library (``fieldplan
--help`` and the web's form page stay quick), and the few rules that matter here (choices,
ranges, which design a parameter belongs to, parameters that go together) read
more plainly as code than as validators. Each field's ``metadata`` describes it
for forms and help: kind, choices, default, unit, help text, designs, flag.

Parameter names are unique across sections, so a spec has one flat form,
:meth:`PlanSpec.to_dict`, used for ``Plan.params``, the manifest and recipes::

    spec = PlanSpec.from_dict({"design": "random", "per_block": 5, "purpose": "soil"})
    spec.to_dict()["per_block"]            # 5
    PlanSpec.from_dict(spec.to_dict()) == spec
    spec_schema()["fields"]                # one JSON-able description per parameter

Designs are registered in :data:`DESIGNS` (see :func:`register_design`): a new
design is one :class:`DesignInfo` naming its runner; its choices then appear in
the spec, the CLI and the schema.
"""

from __future__ import annotations

import dataclasses
import math
import re
import string
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field, fields
from pathlib import PurePath
from typing import Any, ClassVar

from fieldplan.errors import DesignError, OptionError
from fieldplan.planning.registry import DESIGNS, DesignInfo, register_design

__all__ = [
    "SpecError",
    "SpecDesignError",
    "DesignInfo",
    "DESIGNS",
    "register_design",
    "GridSpec",
    "SizeSpec",
    "ClusterSpec",
    "SampleSpec",
    "SpareSpec",
    "InputSpec",
    "OutputSpec",
    "ScaleSpec",
    "PlanSpec",
    "spec_schema",
    "param_info",
    "flag_of",
    "RUNTIME_KEYS",
]

#: Keys ``Plan.params`` holds beside the spec's own: the seed, the plan's code
#: and the grid spacing actually used (also when a density set it). They are
#: accepted and skipped by :meth:`PlanSpec.from_dict`, so a manifest's
#: parameters can be fed straight back in.
RUNTIME_KEYS = ("seed", "plan_id", "spacing_m")


class _NamedParam:
    """An error about a plan parameter: ``param`` names it, ``template`` words the message.

    The template refers to parameters as ``{name}`` fields; :meth:`render` fills
    them with other names, e.g. command-line flags (``str(err)`` uses the spec's).
    """

    def __init__(self, param: str, template: str) -> None:
        self.param = param
        self.template = template
        super().__init__(self.render())

    def render(self, namer: Callable[[str], str] | None = None) -> str:
        """The message with each parameter named by ``namer`` (default: its spec name)."""
        namer = namer or (lambda name: name)
        return string.Formatter().vformat(self.template, (), _Names(namer))


class SpecError(_NamedParam, OptionError):
    """A plan parameter is missing, out of range or does not fit the others.

    ``param`` is the parameter's name in the spec (``spacing``, ``per_block``);
    :meth:`render` words the message with other names, e.g. command-line flags.
    """


class SpecDesignError(_NamedParam, DesignError):
    """A design cannot be carried out with these blocks and parameters; ``param`` names the one to change."""


class _Names(dict):
    def __init__(self, namer: Callable[[str], str]) -> None:
        super().__init__()
        self._namer = namer

    def __missing__(self, key: str) -> str:
        return self._namer(key)


def _q(value: Any) -> str:
    """A user's value inside a message template (braces escaped)."""
    return repr(value).replace("{", "{{").replace("}", "}}")


def _fail(param: str, text: str) -> SpecError:
    """``SpecError`` whose message starts with the parameter's name."""
    return SpecError(param, "{" + param + "} " + text)



# ----------------------------------------------------------------------------
# Field metadata


def _param(
    default: Any = None,
    *,
    kind: str,
    help: str,  # noqa: A002 - the natural name of a help text
    panel: str,
    unit: str | None = None,
    choices: tuple[str, ...] | Callable[[], tuple[str, ...]] | None = None,
    designs: tuple[str, ...] | None = None,
    flag: str | None = None,
    minimum: float | None = None,
    above: float | None = None,
    maximum: float | None = None,
    shown_default: Any = None,
    identity: bool = True,
    aliases: tuple[str, ...] = (),
    former_values: dict[str, str] | None = None,
) -> Any:
    """A dataclass field with the metadata forms and help need.

    ``kind`` is one of ``number, integer, string, choice, boolean, path, angle,
    mapping, list``. ``designs`` limits the parameter to some designs (``None``:
    every design). ``shown_default`` is the value used when the field is left
    empty (``None``), e.g. 16 cores for soil plans. ``identity=False`` marks
    parameters that change how a plan is computed or written but not its points
    (engine, formats), left out of the plan's code. ``aliases`` are former flags,
    still accepted (hidden) for one release. ``help`` may name other parameters
    as ``{name}``: forms show the name, the CLI its flag.
    """
    meta = {
        "kind": kind,
        "help": help,
        "panel": panel,
        "unit": unit,
        "choices": choices,
        "designs": designs,
        "flag": flag,
        "minimum": minimum,
        "above": above,
        "maximum": maximum,
        "shown_default": shown_default,
        "identity": identity,
        "aliases": aliases,
        "former_values": dict(former_values or {}),
    }
    if isinstance(default, dict | list):
        raise TypeError("use a tuple default")
    return field(default=default, metadata=meta)


_UNIT_WORDS = {"m": "metres", "cm": "centimetres"}


def _check_value(name: str, value: Any, meta: Mapping) -> Any:
    """Check one value against its metadata; return it normalised (ints, floats, tuples)."""
    if value is None:
        return None
    kind = meta["kind"]
    if kind in ("number", "integer"):
        if isinstance(value, bool) or not isinstance(value, int | float):
            try:
                value = float(str(value).strip())
            except ValueError:
                raise _fail(name, f"must be a number, got {_q(value)}") from None
        if not math.isfinite(value):
            raise _fail(name, f"must be a finite number, got {value}")
        if kind == "integer":
            if int(value) != value:
                raise _fail(name, f"must be a whole number, got {_q(value)}")
            value = int(value)
        else:
            value = float(value)
        unit = _UNIT_WORDS.get(meta["unit"], meta["unit"] or "")
        if meta["above"] == 0 and not value > 0:
            raise _fail(name, f"must be positive {unit}, got {value:g}".replace("  ", " ").replace(" ,", ","))
        if meta["above"] is not None and not value > meta["above"]:
            raise _fail(name, f"must be more than {meta['above']:g} {unit}, got {value:g}".replace(" ,", ","))
        if meta["minimum"] == 0 and value < 0:
            raise _fail(name, f"must be zero or positive {unit}, got {value:g}".replace(" ,", ","))
        if meta["minimum"] is not None and value < meta["minimum"]:
            raise _fail(name, f"must be {meta['minimum']:g} or more, got {value:g}")
        if meta["maximum"] is not None and value > meta["maximum"]:
            raise _fail(name, f"must be at most {meta['maximum']:g}{unit}, got {value:g}")
        return value
    if kind == "choice":
        choices = _choices(meta)
        text = str(value).strip().lower()
        # A former spelling of a choice (kept for one release) reads as the new one.
        text = meta["former_values"].get(text, text)
        if text not in choices:
            raise _fail(name, f"must be one of {', '.join(choices)}; got {_q(value)}")
        return text
    if kind == "boolean":
        if isinstance(value, str) and value.lower() in ("true", "false"):
            return value.lower() == "true"
        if not isinstance(value, bool):
            raise _fail(name, f"must be true or false, got {_q(value)}")
        return value
    if kind in ("string", "path"):
        if not isinstance(value, str | int | float) or isinstance(value, bool):
            raise _fail(name, f"must be text, got {_q(value)}")
        text = str(value)
        if not text.strip():
            raise _fail(name, "must not be empty")
        return text
    if kind == "angle":
        if isinstance(value, str) and value.strip().lower() == "rows":
            return "rows"
        try:
            number = float(value) if not isinstance(value, bool) else None
        except (TypeError, ValueError):
            number = None
        if number is None:
            raise _fail(name, f"takes degrees (e.g. 30) or 'rows'; got {_q(value)}")
        if not math.isfinite(number):
            raise _fail(name, f"must be a finite number, got {number}")
        return number
    if kind == "list":
        if isinstance(value, str):
            value = value.split(",")
        items = tuple(str(v).strip().lower() for v in value if str(v).strip())
        if not items:
            raise _fail(name, "must name at least one item")
        return items
    if kind == "mapping":
        return _mapping(name, value)
    raise TypeError(f"unknown kind {kind}")  # pragma: no cover - a programming error


def _mapping(name: str, value: Any) -> tuple[tuple[str, str], ...]:
    """``{ROLE: SOURCE}``, ``[(ROLE, SOURCE)]`` or ``["ROLE=SOURCE"]`` as sorted pairs."""
    if isinstance(value, Mapping):
        pairs = list(value.items())
    elif isinstance(value, str):
        pairs = [value]
    else:
        pairs = list(value)
    out: dict[str, str] = {}
    for item in pairs:
        if isinstance(item, str):
            role, sep, source = item.partition("=")
            if not sep:
                raise _fail(name, f"takes ROLE=SOURCE, e.g. row_spacing=RowSpacing; got {_q(item)}")
        else:
            role, source = item
        role, source = str(role).strip().lower(), str(source).strip()
        if not re.fullmatch(r"[a-z][a-z0-9_]*", role) or not source:
            raise _fail(name, f"takes ROLE=SOURCE, e.g. row_spacing=RowSpacing; got {_q(item)}")
        if role in out and out[role] != source:
            raise _fail(name, f"gives role {_q(role)} twice ({_q(out[role])} and {_q(source)})")
        out[role] = source
    return tuple(sorted(out.items()))


def _choices(meta: Mapping) -> tuple[str, ...]:
    choices = meta["choices"]
    return tuple(choices()) if callable(choices) else tuple(choices or ())


class _Section:
    """Shared behaviour of the spec's sections: check and normalise every field."""

    SECTION: ClassVar[str] = ""
    TITLE: ClassVar[str] = ""

    def __post_init__(self) -> None:
        for f in fields(self):  # type: ignore[arg-type]
            value = _check_value(f.name, getattr(self, f.name), f.metadata)
            object.__setattr__(self, f.name, value)
        self._check()

    def _check(self) -> None:
        """Rules between this section's fields (override)."""

    def to_dict(self) -> dict[str, Any]:
        """This section's parameters by name, JSON-serialisable."""
        out = {}
        for f in fields(self):  # type: ignore[arg-type]
            value = getattr(self, f.name)
            if f.metadata["kind"] == "mapping" and value is not None:
                value = dict(value)
            elif isinstance(value, tuple):
                value = list(value)
            out[f.name] = value
        return out


def _design_names() -> tuple[str, ...]:
    return tuple(DESIGNS)


_STRATIFIED = ("random", "balanced", "clusters")

# ----------------------------------------------------------------------------
# Sections


@dataclass(frozen=True)
class GridSpec(_Section):
    """The systematic grid (``design="grid"``)."""

    SECTION: ClassVar[str] = "grid"
    TITLE: ClassVar[str] = "Grid"

    spacing: float | None = _param(
        kind="number",
        unit="m",
        above=0,
        designs=("grid",),
        panel="grid",
        help="Grid spacing in metres (or give {per_ha}).",
    )
    grid_layout: str = _param(
        "square",
        kind="choice",
        choices=("square", "triangular"),
        designs=("grid",),
        panel="grid",
        aliases=("--layout",),
        help="Grid layout: square, or triangular (rows of points offset by half a spacing).",
    )
    random_start: str = _param(
        "field",
        kind="choice",
        choices=("field", "block"),
        designs=("grid",),
        panel="grid",
        aliases=("--start",),
        help="Where the grid's random start is drawn: once for the whole farm (field) or per block.",
    )
    angle: float | str = _param(
        0.0,
        kind="angle",
        unit="degrees",
        designs=("grid",),
        panel="grid",
        help="Grid bearing in degrees clockwise from north, or 'rows' to follow each block's row bearing.",
    )


@dataclass(frozen=True)
class SizeSpec(_Section):
    """Sample size and strata."""

    SECTION: ClassVar[str] = "size"
    TITLE: ClassVar[str] = "Strata and size"

    per_ha: float | None = _param(
        kind="number",
        unit="points/ha",
        above=0,
        panel="grid",
        help="Density in points per hectare: the grid's spacing, or each stratum's sample size.",
    )
    per_block: int | None = _param(
        kind="integer",
        minimum=1,
        designs=_STRATIFIED,
        panel="size",
        help="Points per block.",
    )
    n: int | None = _param(
        kind="integer",
        minimum=1,
        designs=(*_STRATIFIED, "clhs"),
        panel="size",
        help="Total points, allocated over strata.",
    )
    strata_by: str | None = _param(
        kind="string",
        panel="size",
        help="Block field whose values are strata (default: each block is a stratum).",
    )
    allocation: str = _param(
        "proportional",
        kind="choice",
        choices=("proportional", "equal", "neyman", "optimal"),
        designs=_STRATIFIED,
        panel="size",
        help="With {n}: proportional (to area or {size_field}), equal, neyman or optimal.",
    )
    size_field: str | None = _param(
        kind="string",
        designs=_STRATIFIED,
        panel="size",
        help="With {n}: block field used as stratum size instead of area.",
    )
    sd_field: str | None = _param(
        kind="string",
        designs=_STRATIFIED,
        panel="size",
        help="neyman/optimal: block field with the expected standard deviation.",
    )
    cost_field: str | None = _param(
        kind="string",
        designs=_STRATIFIED,
        panel="size",
        help="optimal: block field with the cost of one sample.",
    )
    min_per_stratum: int = _param(
        1,
        kind="integer",
        minimum=0,
        designs=_STRATIFIED,
        panel="size",
        help="Fewest points in any stratum.",
    )
    candidates: int | None = _param(
        kind="integer",
        minimum=10,
        designs=("balanced",),
        panel="size",
        help="balanced: lattice points to choose from (default 200 per point, 2,000-20,000).",
    )
    zones: str | None = _param(
        kind="path",
        designs=_STRATIFIED,
        panel="size",
        help="Zones GeoPackage from 'fieldplan zones': sample each block's zones as strata (docs/zones.md).",
    )
    strata_across_blocks: bool = _param(
        False,
        kind="boolean",
        designs=_STRATIFIED,
        panel="size",
        help="With {zones}: one stratum per zone across blocks, not per zone and block.",
    )
    zone_sd: str | None = _param(
        kind="string",
        designs=_STRATIFIED,
        panel="size",
        help="With {zones}: covariate whose zone SD stands in for the target's SD (neyman; default the first).",
    )
    covariates: str | None = _param(
        kind="string",
        designs=("clhs",),
        panel="size",
        help="clhs: covariate files, comma-separated: GeoTIFF rasters, CSV/GeoJSON surveys (FILE:COLUMN).",
    )
    covariate_cell: float = _param(
        5.0,
        kind="number",
        unit="m",
        above=0,
        designs=("clhs",),
        panel="size",
        help="clhs: grid cell side for the covariates.",
    )
    clhs_iterations: int = _param(
        10_000,
        kind="integer",
        minimum=100,
        designs=("clhs",),
        panel="size",
        help="clhs: simulated annealing steps.",
    )
    cost_covariate: str | None = _param(
        kind="string",
        designs=("clhs",),
        panel="size",
        help="clhs: covariate giving each cell's sampling cost (e.g. metres from a track).",
    )

    def _check(self) -> None:
        if self.zones is None:
            for name in ("strata_across_blocks", "zone_sd"):
                if getattr(self, name) not in (None, False):
                    raise SpecError(name, "{" + name + "} applies with {zones} only")
        if self.allocation in ("neyman", "optimal") and self.sd_field is None and self.zones is None:
            raise SpecError(
                "sd_field", "{allocation} " + self.allocation + " needs {sd_field} (a standard deviation per block)"
            )
        if self.allocation == "optimal" and self.cost_field is None:
            raise SpecError("cost_field", "{allocation} optimal needs {cost_field} (cost per sample per block)")
        if self.n is None and self.allocation != "proportional":
            raise SpecError("allocation", "{allocation} applies with {n} (a total to allocate) only")
        if self.n is None and self.size_field is not None:
            raise SpecError("size_field", "{size_field} applies with {n} (a total to allocate) only")


_PLACEHOLDERS = ("block", "row", "plant", "units")


@dataclass(frozen=True)
class ClusterSpec(_Section):
    """Plants picked from the rows (``design="clusters"``)."""

    SECTION: ClassVar[str] = "clusters"
    TITLE: ClassVar[str] = "Clusters"

    target_units: int | None = _param(
        kind="integer",
        minimum=1,
        designs=("clusters",),
        panel="clusters",
        help="Units to collect per stratum (with {plants_per_cluster}).",
    )
    plants_per_cluster: int | None = _param(
        kind="integer",
        minimum=1,
        designs=("clusters",),
        panel="clusters",
        shown_default=1,
        aliases=("--units-per-cluster",),
        help="Consecutive plants in each cluster, one unit taken at each.",
    )
    skip_row_ends: int = _param(
        0,
        kind="integer",
        minimum=0,
        designs=("clusters",),
        panel="clusters",
        help="Plants left out at each end of every row.",
    )
    skip_border_rows: int = _param(
        0,
        kind="integer",
        minimum=0,
        designs=("clusters",),
        panel="clusters",
        help="Rows left out on each side of a block.",
    )
    rows: str | None = _param(
        kind="path",
        designs=("clusters",),
        panel="clusters",
        help="Mapped row lines (GeoJSON, GeoPackage, Shapefile) instead of the spacing model.",
    )
    instructions: str | None = _param(
        kind="string",
        designs=("clusters",),
        panel="clusters",
        help="Field instructions with {{row}}, {{plant}}, {{units}}, {{block}} placeholders.",
    )

    def _check(self) -> None:
        if self.target_units is not None and self.plants_per_cluster is None:
            raise SpecError(
                "plants_per_cluster", "{target_units} needs {plants_per_cluster} (plants in each cluster)"
            )
        if self.instructions is not None:
            try:
                parts = list(string.Formatter().parse(self.instructions))
            except ValueError as err:
                text = str(err).replace("{", "{{").replace("}", "}}")
                raise _fail("instructions", text + "; use {{row}}, {{plant}}, {{units}} or {{block}}") from None
            for _, name, spec, conv in parts:
                if name is not None and (name not in _PLACEHOLDERS or spec or conv):
                    raise _fail(
                        "instructions",
                        f"has an unknown placeholder {_q('{' + name + '}')}; "
                        "use {{row}}, {{plant}}, {{units}} or {{block}}",
                    )


@dataclass(frozen=True)
class SampleSpec(_Section):
    """What the samples are for: ids, depth, soil cores, ripeness instructions."""

    SECTION: ClassVar[str] = "samples"
    TITLE: ClassVar[str] = "Samples"

    purpose: str = _param(
        "general",
        kind="choice",
        choices=("general", "soil", "ripeness"),
        panel="samples",
        help="What the samples are for: general, soil (composites of cores) or ripeness.",
    )
    cores: int | None = _param(
        kind="integer",
        minimum=1,
        maximum=200,
        panel="samples",
        shown_default=16,
        help="Soil: cores per composite sample (15-20 is usual).",
    )
    core_radius: float | None = _param(
        kind="number",
        unit="m",
        above=0,
        panel="samples",
        shown_default=10.0,
        help="Soil: metres around each point for its cores.",
    )
    composite: str | None = _param(
        kind="choice",
        choices=("cell", "block"),
        panel="samples",
        shown_default="cell",
        former_values={"zone": "block"},
        help="Soil: 'cell' (one composite per point) or 'block' (one per block, zig-zag cores).",
    )
    core_buffer: float | None = _param(
        kind="number",
        unit="m",
        minimum=0,
        panel="samples",
        shown_default=30.0,
        help="Soil: metres kept from block edges and exclusions.",
    )
    depth: str | None = _param(
        kind="string",
        unit="cm",
        panel="samples",
        shown_default="0-15 for soil",
        help="Sampling depth range in cm, e.g. 0-15.",
    )
    crop_profile: str | None = _param(
        kind="string",
        panel="samples",
        shown_default="wine-grapes",
        help="Ripeness: wine-grapes, table-grapes, pome-fruit, stone-fruit or a TOML file.",
    )

    def _check(self) -> None:
        if self.purpose != "soil":
            for name in ("cores", "core_radius", "composite", "core_buffer"):
                if getattr(self, name) is not None:
                    raise _fail(name, "only applies to {purpose} soil (got {purpose} " + self.purpose + ")")
        if self.purpose != "ripeness" and self.crop_profile is not None:
            raise _fail("crop_profile", "only applies to {purpose} ripeness (got {purpose} " + self.purpose + ")")
        if self.depth is not None:
            match = re.fullmatch(r"\s*(\d+(?:\.\d+)?)\s*-\s*(\d+(?:\.\d+)?)\s*(?:cm)?\s*", self.depth)
            if not match:
                raise _fail("depth", f"takes a range in cm such as 0-15 or 15-30; got {_q(self.depth)}")
            if not float(match.group(2)) > float(match.group(1)):
                raise _fail("depth", f"{_q(self.depth)}: the bottom must be deeper than the top")


@dataclass(frozen=True)
class SpareSpec(_Section):
    """When the field disagrees: spares and substitutes."""

    SECTION: ClassVar[str] = "replacements"
    TITLE: ClassVar[str] = "Spares and substitutes"

    spares: int = _param(
        0,
        kind="integer",
        minimum=0,
        designs=("random", "balanced", "clusters"),
        panel="samples",
        help="Extra points per stratum, used in rank order when a point cannot be sampled.",
    )
    substitute: str = _param(
        "none",
        kind="choice",
        choices=("none", "within-cell"),
        designs=("grid",),
        panel="samples",
        help="'within-cell' precomputes one substitute per grid point, in its lattice cell.",
    )


@dataclass(frozen=True)
class InputSpec(_Section):
    """How the blocks file is read, and areas kept free of samples."""

    SECTION: ClassVar[str] = "input"
    TITLE: ClassVar[str] = "Input"

    layer: str | None = _param(kind="string", panel="input", help="GeoPackage layer holding the blocks.")
    id_field: str | None = _param(
        kind="string", panel="input", help="Field with block ids (default: block, block_id, id or name)."
    )
    select: str | None = _param(
        kind="string",
        panel="input",
        help="Plan only blocks whose FIELD matches: FIELD=VALUE[,VALUE...], e.g. 'crop=wine grape'.",
    )
    repair: bool = _param(
        False, kind="boolean", panel="input", help="Repair invalid (self-intersecting) polygons instead of stopping."
    )
    overlaps: str = _param(
        "refuse",
        kind="choice",
        choices=("refuse", "first"),
        panel="input",
        identity=False,
        help="Blocks overlapping each other: refuse (name the pair and the area) or first (the "
        "overlap stays in the block listed first in the file; later blocks lose it).",
    )
    columns: tuple[tuple[str, str], ...] = _param(
        (),
        kind="mapping",
        flag="--column",
        panel="input",
        help="Which file field plays which role, ROLE=FIELD (block, variety, row_spacing, "
        "plant_spacing, row_bearing, crop, or a field used for strata).",
    )
    length_unit: str = _param(
        "m",
        kind="choice",
        choices=("m", "ft", "yd", "us-ft"),
        panel="input",
        help="Unit of the row and plant spacing fields: m, ft, yd or us-ft (US survey foot).",
    )
    exclude: str | None = _param(
        kind="path",
        panel="input",
        help="Polygons to keep samples out of (wet spots, buildings, tracks).",
    )
    revisit: str | None = _param(
        kind="path",
        panel="input",
        identity=False,
        help="Earlier plan folder whose sites to sample again: same spots, new sample ids "
        "linked to the earlier ones (its parameters, unless given).",
    )
    revisit_changed: str = _param(
        "refuse",
        kind="choice",
        choices=("refuse", "drop"),
        panel="input",
        help="With {revisit}: a site now outside its block or excluded stops the plan (refuse) "
        "or is left out and flagged (drop).",
    )

    def read_options(self) -> dict[str, Any]:
        """Keyword arguments of :func:`fieldplan.read.read_blocks` for this input."""
        out: dict[str, Any] = {"layer": self.layer, "id_field": self.id_field, "repair": self.repair}
        # Passed only when used, so readers without column roles or units keep working.
        if self.columns:
            out["columns"] = dict(self.columns)
        if self.length_unit != "m":
            out["length_unit"] = self.length_unit
        return out


@dataclass(frozen=True)
class OutputSpec(_Section):
    """What is written."""

    SECTION: ClassVar[str] = "outputs"
    TITLE: ClassVar[str] = "Outputs"

    formats: tuple[str, ...] = _param(
        ("all",),
        kind="list",
        panel="outputs",
        identity=False,
        help="Outputs to write: all; core (points.geojson, points.csv, summary.csv, plan.gpkg); or "
        "any of geojson, csv, summary, gpkg, html, gpx, kml, png. manifest.json, plan.gpkg and "
        "README.txt are always written.",
    )
    cautions: str | None = _param(
        kind="path",
        panel="outputs",
        identity=False,
        help="Text file of field cautions, one per line, to carry instead of the defaults.",
    )

    def _check(self) -> None:
        if self.formats == ("all",):
            return  # the default: no need to load the writers to check it
        from fieldplan.store import selected_formats

        try:
            selected_formats(self.formats)
        except OptionError as err:
            raise _fail("formats", "has " + str(err).replace("{", "{{").replace("}", "}}")) from None


@dataclass(frozen=True)
class ScaleSpec(_Section):
    """Where the plan is computed and how large it may be."""

    SECTION: ClassVar[str] = "scale"
    TITLE: ClassVar[str] = "Scale"

    engine: str = _param(
        "local",
        kind="choice",
        choices=("local", "dask"),
        panel="scale",
        identity=False,
        help="Where to plan: local (this process) or dask (groups of blocks in parallel).",
    )
    scheduler: str | None = _param(
        kind="string",
        panel="scale",
        identity=False,
        help="With {engine} dask: address of a running Dask scheduler, e.g. tcp://host:8786 "
        "(default: two worker processes on this machine).",
    )
    max_points: int = _param(
        10_000_000,
        kind="integer",
        minimum=1,
        panel="scale",
        identity=False,
        help="Refuse plans with more points than this.",
    )
    max_blocks: int = _param(
        100_000,
        kind="integer",
        minimum=1,
        panel="scale",
        identity=False,
        help="Refuse block files with more features than this (counted before reading).",
    )

    def _check(self) -> None:
        if self.scheduler is not None and self.engine != "dask":
            raise SpecError("scheduler", "{scheduler} applies to {engine} dask only")


_SECTIONS: tuple[tuple[str, type[_Section]], ...] = (
    ("grid", GridSpec),
    ("size", SizeSpec),
    ("clusters", ClusterSpec),
    ("samples", SampleSpec),
    ("replacements", SpareSpec),
    ("input", InputSpec),
    ("outputs", OutputSpec),
    ("scale", ScaleSpec),
)


@dataclass(frozen=True)
class PlanSpec:
    """Everything that makes a plan, checked.

    Build it from sections (``PlanSpec(design="random", size=SizeSpec(per_block=5))``;
    a section may also be given as a dict) or from flat parameters with
    :meth:`from_dict`. The seed is not part of the spec: it is what changes
    between otherwise equal plans (see :func:`fieldplan.plan.make_plan`).
    """

    design: str = _param(
        "grid",
        kind="choice",
        choices=_design_names,
        panel="grid",
        help="Sampling design: {choices} (docs/designs.md).",
    )
    edge_buffer: float = _param(
        0.0,
        kind="number",
        unit="m",
        minimum=0,
        panel="input",
        help="Metres kept free of samples inside each block edge (headland).",
    )
    grid: GridSpec = field(default_factory=GridSpec)
    size: SizeSpec = field(default_factory=SizeSpec)
    clusters: ClusterSpec = field(default_factory=ClusterSpec)
    samples: SampleSpec = field(default_factory=SampleSpec)
    replacements: SpareSpec = field(default_factory=SpareSpec)
    input: InputSpec = field(default_factory=InputSpec)
    outputs: OutputSpec = field(default_factory=OutputSpec)
    scale: ScaleSpec = field(default_factory=ScaleSpec)

    def __post_init__(self) -> None:
        for name, cls in _SECTIONS:
            value = getattr(self, name)
            if isinstance(value, Mapping):
                object.__setattr__(self, name, _section_from(cls, value))
            elif not isinstance(value, cls):
                raise SpecError(name, "{" + name + "} " + f"must be a {cls.__name__} or a dict, got {_q(value)}")
        for f in _own_fields():
            object.__setattr__(self, f.name, _check_value(f.name, getattr(self, f.name), f.metadata))
        self._check()

    # -- rules across sections --------------------------------------------------------

    def _check(self) -> None:
        info = DESIGNS[self.design]
        values = self.to_dict()
        # A parameter of another design is a mistake worth naming (defaults are fine).
        for name, meta in _FIELD_META.items():
            designs = meta["designs"]
            if designs is None or self.design in designs:
                continue
            if values[name] != _DEFAULTS[name]:
                raise SpecError(
                    name,
                    "{" + name + "} applies to {design} " + ", ".join(designs) + f" only, not {self.design}"
                    + _HINTS.get((name, self.design), ""),
                )
        given = [k for k in info.sizes if values.get(k) is not None]
        if info.name == "grid":
            if len(given) == 2:
                raise SpecError("per_ha", "give {spacing} or {per_ha}, not both")
            if not given:
                raise SpecError("spacing", "give a grid {spacing} in metres or a density {per_ha}")
        elif len(given) != 1:
            choices = ", ".join("{" + k + "}" for k in info.sizes)
            got = " (got " + ", ".join("{" + k + "}" for k in given) + ")" if given else ""
            raise SpecError(
                given[-1] if given else info.sizes[0],
                f"design {self.design} needs exactly one sample size: {choices}{got}",
            )

    # -- flat form ----------------------------------------------------------------

    def to_dict(self) -> dict[str, Any]:
        """Every parameter by its name (flat; JSON- and TOML-able apart from ``None``)."""
        out: dict[str, Any] = {"design": self.design, "edge_buffer": self.edge_buffer}
        for name, _ in _SECTIONS:
            out.update(getattr(self, name).to_dict())
        return out

    def identity(self) -> dict[str, Any]:
        """The parameters that decide the points (what the plan's code is made from)."""
        values = self.to_dict()
        out = {k: v for k, v in values.items() if _FIELD_META[k]["identity"]}
        if out.get("exclude"):
            # The file's name, not the path as typed: the same plan run from another folder (or
            # saved from the web workspace, which keeps uploads by name) keeps its sample ids.
            out["exclude"] = PurePath(str(out["exclude"]).replace("\\", "/")).name
        return out

    @classmethod
    def from_dict(cls, values: Mapping[str, Any], *, strict: bool = True) -> PlanSpec:
        """Build a spec from flat parameters, section tables, or a manifest's ``parameters``.

        Keys may be flat (``spacing = 40``) or grouped by section
        (``{"grid": {"spacing": 40}}``); :data:`RUNTIME_KEYS` (seed, plan_id,
        spacing_m) are skipped, and the parameter names of plans written before
        the spec existed (``spacing_m``, ``core_radius_m``, ``design_options``...)
        are read too. An unknown key raises :class:`SpecError` unless ``strict`` is false.
        """
        flat = _flatten(values)
        flat = _legacy(flat)
        unknown = [k for k in flat if k not in _FIELD_META and k not in RUNTIME_KEYS]
        if unknown and strict:
            close = _close_names(unknown[0])
            raise SpecError(
                unknown[0],
                f"unknown parameter {_q(unknown[0])}" + (f"; did you mean {close}?" if close else ""),
            )
        parts: dict[str, dict[str, Any]] = {name: {} for name, _ in _SECTIONS}
        own: dict[str, Any] = {}
        for key, value in flat.items():
            if key not in _FIELD_META:
                continue
            section = _SECTION_OF[key]
            if value is None:
                continue
            (parts[section] if section else own)[key] = value
        sections = {name: _section_from(kls, parts[name]) for name, kls in _SECTIONS}
        return cls(**own, **sections)

    def replace(self, **changes: Any) -> PlanSpec:
        """A new spec with some flat parameters changed (``None`` restores a default)."""
        values = {k: v for k, v in self.to_dict().items() if k not in changes}
        values.update({k: v for k, v in changes.items() if v is not None})
        return PlanSpec.from_dict(values)

    @property
    def design_info(self) -> DesignInfo:
        return DESIGNS[self.design]

    @classmethod
    def from_options(
        cls,
        *,
        design: str = "grid",
        spacing: float | None = None,
        per_ha: float | None = None,
        layout: str = "square",
        start: str = "field",
        angle: float | str = 0.0,
        edge_buffer: float = 0.0,
        max_points: int = 10_000_000,
        design_options: Mapping | None = None,
        samples: Mapping | None = None,
        spares: int = 0,
        substitute: str = "none",
        engine: str = "local",
        scheduler: str | None = None,
    ) -> PlanSpec:
        """A spec from the keyword options ``make_plan`` took before the spec existed.

        ``design_options`` and ``samples`` are the dicts of those days; a ``rows``
        GeoDataFrame among the design options is not a parameter and must be
        passed to ``make_plan(rows=...)`` instead (it does so itself).
        """
        opts = {k: v for k, v in dict(design_options or {}).items() if k != "rows"}
        if "rows_file" in opts:
            opts["rows"] = opts.pop("rows_file")
        values = {
            "design": design,
            "spacing": spacing,
            "per_ha": per_ha,
            "grid_layout": layout,
            "random_start": start,
            "angle": angle,
            "edge_buffer": edge_buffer,
            "max_points": max_points,
            "spares": spares,
            "substitute": substitute,
            "engine": engine,
            "scheduler": scheduler,
            **opts,
            **dict(samples or {}),
        }
        return cls.from_dict(values)


# ----------------------------------------------------------------------------
# Tables built once from the dataclasses


def _own_fields() -> tuple[dataclasses.Field, ...]:
    return tuple(f for f in fields(PlanSpec) if "kind" in f.metadata)


def _section_from(cls: type[_Section], values: Mapping[str, Any]) -> _Section:
    names = {f.name for f in fields(cls)}  # type: ignore[arg-type]
    unknown = [k for k in values if k not in names]
    if unknown:
        raise SpecError(unknown[0], f"unknown parameter {_q(unknown[0])} in section {cls.SECTION}")
    return cls(**{k: v for k, v in values.items() if v is not None})


_FIELD_META: dict[str, Mapping] = {}
_SECTION_OF: dict[str, str | None] = {}
_DEFAULTS: dict[str, Any] = {}
for _f in _own_fields():
    _FIELD_META[_f.name], _SECTION_OF[_f.name] = _f.metadata, None
for _name, _cls in _SECTIONS:
    for _f in fields(_cls):  # type: ignore[arg-type]
        if _f.name in _FIELD_META:  # pragma: no cover - a programming error
            raise TypeError(f"parameter {_f.name} defined twice")
        _FIELD_META[_f.name], _SECTION_OF[_f.name] = _f.metadata, _name
for _name, _meta in _FIELD_META.items():
    _DEFAULTS[_name] = None
for _f in (*_own_fields(), *(f for _, c in _SECTIONS for f in fields(c))):  # type: ignore[arg-type]
    _d = _f.default
    _DEFAULTS[_f.name] = list(_d) if isinstance(_d, tuple) and _f.metadata["kind"] == "list" else (
        {} if _f.metadata["kind"] == "mapping" else _d
    )

_HINTS = {
    ("spacing", "random"): "; give {per_block}, {per_ha} or {n}",
    ("spacing", "balanced"): "; give {per_block}, {per_ha} or {n}",
    ("spacing", "clusters"): "; give {per_block}, {per_ha}, {n} or {target_units}",
    ("spares", "grid"): "; grid plans keep their spacing with {substitute} within-cell instead",
    ("substitute", "random"): "; other designs use {spares}",
    ("substitute", "balanced"): "; other designs use {spares}",
    ("substitute", "clusters"): "; other designs use {spares}",
}

#: Names of plans written before the spec, and what they are now.
_LEGACY_NAMES = {
    "edge_buffer_m": "edge_buffer",
    "core_radius_m": "core_radius",
    "core_buffer_m": "core_buffer",
    "depth_cm": "depth",
    "rows_file": "rows",
    "units_per_cluster": "plants_per_cluster",
    "layout": "grid_layout",
    "start": "random_start",
}


def _flatten(values: Mapping[str, Any]) -> dict[str, Any]:
    flat: dict[str, Any] = {}
    sections = {name for name, _ in _SECTIONS} | {"design_options"}
    for key, value in values.items():
        if key in sections and isinstance(value, Mapping):
            for inner, v in value.items():
                flat[inner] = v
        elif key == "columns" and isinstance(value, Mapping):
            flat[key] = dict(value)
        else:
            flat[key] = value
    return flat


def _legacy(flat: dict[str, Any]) -> dict[str, Any]:
    out = {}
    for key, value in flat.items():
        new = _LEGACY_NAMES.get(key, key)
        if new != key and key in flat and new in flat:
            continue
        out[new] = value
    if "spacing" not in flat and flat.get("spacing_m") is not None and flat.get("per_ha") is None:
        out["spacing"] = flat["spacing_m"]
    if "depth" in out and out["depth"] == "":
        out["depth"] = None
    return out


def _param_meta(name: str) -> Mapping:
    """The metadata of parameter ``name`` (for checking a value the way the spec does)."""
    return _FIELD_META[name]


def _close_names(name: str) -> str:
    import difflib

    near = difflib.get_close_matches(name, list(_FIELD_META), n=2, cutoff=0.6)
    return " or ".join(repr(n) for n in near)


# ----------------------------------------------------------------------------
# Describing the parameters


def flag_of(param: str) -> str:
    """The command-line flag of a parameter (``per_ha`` -> ``--per-ha``)."""
    meta = _FIELD_META.get(param)
    if meta is not None and meta["flag"]:
        return meta["flag"]
    return "--" + param.replace("_", "-")


def param_info(name: str) -> dict[str, Any]:
    """JSON-serialisable description of one parameter (see :func:`spec_schema`)."""
    if name not in _FIELD_META:
        raise SpecError(name, f"unknown parameter {_q(name)}")
    meta = _FIELD_META[name]
    default = _DEFAULTS[name]
    shown = meta["shown_default"]
    return {
        "name": name,
        "section": _SECTION_OF[name],
        "panel": meta["panel"],
        "kind": meta["kind"],
        "choices": list(_choices(meta)) or None,
        "default": default,
        "effective_default": shown if shown is not None else default,
        "required": False,
        "unit": meta["unit"],
        "minimum": meta["minimum"],
        "exclusive_minimum": meta["above"],
        "maximum": meta["maximum"],
        "designs": list(meta["designs"]) if meta["designs"] else list(DESIGNS),
        "flag": flag_of(name),
        # A file or folder on the machine that plans: a web form should not offer it.
        "server_path": meta["kind"] == "path",
        "help": help_text(name),
        "aliases": list(meta["aliases"]),
        "former_values": dict(meta["former_values"]),
    }


def help_text(name: str, namer: Callable[[str], str] | None = None) -> str:
    """The help of parameter ``name``, other parameters named by ``namer`` (default: their names)."""
    namer = namer or (lambda n: n)
    meta = _FIELD_META[name]
    # "{choices}" lists the current choices (the design registry may have grown).
    text = meta["help"].replace("{choices}", ", ".join(_choices(meta)))
    return string.Formatter().vformat(text, (), _Names(namer))


#: Panels in the order help and forms show them, with their titles.
PANELS = {
    "input": "Input",
    "grid": "Design and grid",
    "size": "Strata and size",
    "clusters": "Clusters",
    "samples": "Samples",
    "outputs": "Outputs",
    "scale": "Scale",
}


def spec_schema() -> dict[str, Any]:
    """A JSON-serialisable description of every parameter, for forms and documentation.

    Returns
    -------
    dict
        ``designs`` (name, help, size parameters, spares), ``panels`` (id and
        title, in display order), ``sections`` (the spec's sections) and
        ``fields``: one entry per parameter with ``name, section, panel, kind,
        choices, default, effective_default, unit, minimum, exclusive_minimum,
        maximum, designs, flag, server_path, help, aliases``.
    """
    return {
        "version": 1,
        "designs": [
            {"name": d.name, "help": d.help, "sizes": list(d.sizes), "spares": d.spares, "stratified": d.stratified}
            for d in DESIGNS.values()
        ],
        "panels": [{"id": k, "title": v} for k, v in PANELS.items()],
        "sections": [{"id": name, "title": cls.TITLE} for name, cls in _SECTIONS],
        "fields": [param_info(name) for name in _FIELD_META],
    }


def params_in_panel(panel: str) -> Iterable[str]:
    """Parameter names shown in ``panel``."""
    return [n for n, m in _FIELD_META.items() if m["panel"] == panel]


def parameters_markdown() -> str:
    """The table of every plan parameter in ``docs/parameters.md`` (kept current by a test)."""
    lines = [
        "# Plan parameters",
        "",
        "Every parameter of a plan, as `fieldplan plan` flags, recipe keys, `PlanSpec.from_dict` keys",
        "and the web form's fields. Generated from `fieldplan.spec` (`spec_schema()`); do not edit by hand:",
        "`python -c 'from fieldplan.spec import parameters_markdown as m; print(m(), end=\"\")' > docs/parameters.md`.",
        "",
    ]
    schema = spec_schema()
    lines += ["Designs: " + "; ".join(f"`{d['name']}` ({d['help']})" for d in schema["designs"]) + ".", ""]
    for panel in schema["panels"]:
        rows = [f for f in schema["fields"] if f["panel"] == panel["id"]]
        if not rows:
            continue
        lines += [f"## {panel['title']}", "", "| parameter | flag | default | unit | designs | meaning |", "|---|---|---|---|---|---|"]
        for f in rows:
            default = f["effective_default"]
            shown = "" if default in (None, {}, []) else ",".join(default) if isinstance(default, list) else str(default)
            designs = "all" if f["designs"] == [d["name"] for d in schema["designs"]] else ", ".join(f["designs"])
            choices = f" One of: {', '.join(f['choices'])}." if f["choices"] else ""
            former = f" Former flag: {', '.join(f['aliases'])}." if f["aliases"] else ""
            text = (f["help"] + choices + former).replace("|", "\\|")
            lines.append(f"| `{f['name']}` | `{f['flag']}` | {shown} | {f['unit'] or ''} | {designs} | {text} |")
        lines.append("")
    return "\n".join(lines)
