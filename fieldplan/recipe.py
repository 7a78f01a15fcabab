"""Plan recipes: a plan's parameters in a TOML file, to plan the same way next season.

A recipe holds the parameters of :class:`fieldplan.spec.PlanSpec` (same names
as the flags, grouped in the spec's sections) and optionally the seed::

    # fieldplan recipe
    seed = 7
    design = "random"
    edge_buffer = 8.0

    [size]
    per_block = 3

    [samples]
    purpose = "soil"

    [input]
    length_unit = "ft"

    [input.columns]
    row_spacing = "RowSpacing"

``fieldplan recipe PLAN_DIR`` writes the recipe of an existing plan (from its
``manifest.json``); ``fieldplan plan BLOCKS --recipe FILE`` reads one, flags
given on the command line winning. File paths in a recipe (exclusions, rows,
cautions) are used as written, relative to the folder the command runs in.
"""

from __future__ import annotations

import json
import math
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from fieldplan.errors import InputError, PlanDirError
from fieldplan.spec import PlanSpec, SpecError, param_info

__all__ = ["recipe_text", "read_recipe", "plan_recipe", "recipe_for_plan", "RecipeError", "merge"]


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):  # pragma: no cover - a spec holds finite numbers only
            raise ValueError(value)
        return repr(value)
    if isinstance(value, str):
        # A JSON string is a valid TOML basic string (same escapes, \uXXXX included).
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {value!r} to TOML")  # pragma: no cover


def _key(name: str) -> str:
    return name if name.replace("_", "").replace("-", "").isalnum() and name.isascii() else json.dumps(name)


def recipe_text(spec: PlanSpec, *, seed: int | None = None, comment: str | None = None) -> str:
    """The TOML recipe of ``spec`` (the design and every parameter not at its default), with ``seed``."""
    values = spec.to_dict()
    top: list[str] = []
    sections: dict[str, list[str]] = {}
    mappings: dict[str, dict] = {}
    for name, value in values.items():
        info = param_info(name)
        # Defaults and parameters of other designs would only hide what was chosen.
        if value is None or (name != "design" and (value == info["default"] or spec.design not in info["designs"])):
            continue
        section = info["section"]
        if isinstance(value, dict):
            if value:
                mappings[f"{section}.{name}"] = value
            continue
        line = f"{_key(name)} = {_toml_value(value)}"
        (sections.setdefault(section, []) if section else top).append(line)
    from fieldplan import __version__

    lines = [
        "# fieldplan recipe: fieldplan plan BLOCKS --recipe THIS_FILE --out FOLDER",
        f"# written by fieldplan {__version__}; parameters not listed take their defaults",
    ]
    if comment:
        lines += [f"# {part}" for part in comment.splitlines()]
    if seed is not None:
        lines.append(f"seed = {int(seed)}")
    lines += top
    for section, body in sections.items():
        lines += ["", f"[{section}]", *body]
    for table, mapping in mappings.items():
        lines += ["", f"[{table}]", *(f"{_key(k)} = {_toml_value(v)}" for k, v in mapping.items())]
    return "\n".join(lines) + "\n"


def read_recipe(path: str | Path) -> tuple[dict[str, Any], int | None]:
    """Read a recipe file: its parameters (flat, checked) and its seed (``None`` if it has none).

    Raises
    ------
    InputError
        The file is missing or not TOML, or a parameter is unknown or out of
        range (the message names the file and the parameter).
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: recipe not found; give a TOML file written by 'fieldplan recipe'")
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8-sig"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise InputError(f"{path}: not a readable TOML recipe ({err})") from None
    return _checked(data, str(path))


def _checked(data: Mapping[str, Any], source: str) -> tuple[dict[str, Any], int | None]:
    data = dict(data)
    seed = data.pop("seed", None)
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, int) or seed < 0):
        raise InputError(f"{source}: seed must be a whole number of 0 or more, got {seed!r}")
    try:
        spec_values = PlanSpec.from_dict(data, strict=True).to_dict()
    except SpecError as err:
        raise RecipeError(err.param, f"{source}: " + err.template.replace("{", "{{").replace("}", "}}"), err) from None
    # Only what the recipe says: flags and defaults fill the rest.
    given = _given_names(data)
    return {k: v for k, v in spec_values.items() if k in given}, seed


class RecipeError(SpecError, InputError):
    """A recipe's parameter is wrong: names the recipe file and the parameter."""

    def __init__(self, param: str, prefix: str, cause: SpecError) -> None:
        self.cause = cause
        super().__init__(param, prefix + cause.template)


def _given_names(data: Mapping[str, Any]) -> set[str]:
    from fieldplan.spec import _flatten, _legacy

    return set(_legacy(_flatten(data)))


def plan_recipe(plan_dir: str | Path) -> tuple[dict[str, Any], int | None]:
    """The parameters and seed of the plan in ``plan_dir`` (from its ``manifest.json``)."""
    plan_dir = Path(plan_dir)
    path = plan_dir / "manifest.json"
    if not path.is_file():
        raise PlanDirError(f"{plan_dir}: no manifest.json here; give a folder made by 'fieldplan plan'")
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
        params = manifest["parameters"]
    except (ValueError, KeyError, TypeError) as err:
        raise PlanDirError(f"{path}: cannot read the plan's parameters ({err})") from None
    spec = PlanSpec.from_dict(params, strict=False)
    seed = params.get("seed", manifest.get("seed"))
    return spec.to_dict(), (int(seed) if seed is not None else None)


def recipe_for_plan(plan_dir: str | Path, *, seed: bool = True) -> str:
    """The recipe text of the plan in ``plan_dir`` (with its seed unless ``seed`` is false)."""
    values, plan_seed = plan_recipe(plan_dir)
    spec = PlanSpec.from_dict(values)
    return recipe_text(
        spec, seed=plan_seed if seed else None, comment=f"from the plan in {Path(plan_dir).name}"
    )


def merge(base: Mapping[str, Any], given: Mapping[str, Any]) -> dict[str, Any]:
    """Parameters of a recipe (or earlier plan) overridden by those given now.

    A sample size given now replaces the recipe's (``--n 20`` over a recipe's
    ``per_block = 3``), and a design given now drops the recipe's parameters
    that do not apply to it.
    """
    from fieldplan.spec import DESIGNS

    sizes = {name for info in DESIGNS.values() for name in info.sizes}
    out = {k: v for k, v in base.items() if v is not None}
    if sizes & {k for k, v in given.items() if v is not None}:
        out = {k: v for k, v in out.items() if k not in sizes}
    design = given.get("design")
    if design is not None and design != out.get("design", "grid"):
        out = {
            k: v for k, v in out.items() if design in param_info(k)["designs"]
        }
    out.update({k: v for k, v in given.items() if v is not None})
    return out
