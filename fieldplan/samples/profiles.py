"""Crop profiles: how a ripeness (maturity) sample is gathered at each point.

A profile is a small TOML file. The shipped ones (``wine-grapes``,
``table-grapes``, ``pome-fruit``, ``stone-fruit``) are written from trade
knowledge and say so in their ``basis`` field; users may pass their own file.

Keys
----
schema : int
    Always 1.
name, title, basis : str
    Short name, one-line title, where the numbers come from.
unit : str
    What is collected ("berry", "fruit").
per_sample : [int, int]
    Fewest and most units in one sample.
per_plant : [int, int]
    Fewest and most units taken from one plant.
skip_end_plants, skip_border_rows : int
    Plants left out at each row end; rows left out along each block edge.
sides : "both" | "one"
    Which sides of the row to take from.
exposure, heights : list of str
    Canopy positions to mix, e.g. ``["sun", "shade"]``, ``["top", "middle", "bottom"]``.
handling : str
    How to keep the sample until it reaches the lab.
steps : list of str
    Instructions for the crew, one sentence each.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from fieldplan.errors import InputError

__all__ = ["CropProfile", "load_profile", "parse_profile", "shipped_profiles"]

_TEXT = {"name", "title", "basis", "unit", "handling"}
_RANGES = {"per_sample", "per_plant"}
_COUNTS = {"skip_end_plants", "skip_border_rows"}
_LISTS = {"exposure", "heights", "steps"}
_KEYS = {"schema", "sides"} | _TEXT | _RANGES | _COUNTS | _LISTS
SIDES = ("both", "one")


@dataclass(frozen=True)
class CropProfile:
    """A validated crop profile (see the module docstring for the fields)."""

    name: str
    title: str
    basis: str
    unit: str
    per_sample: tuple[int, int]
    per_plant: tuple[int, int]
    skip_end_plants: int
    skip_border_rows: int
    sides: str
    exposure: tuple[str, ...]
    heights: tuple[str, ...]
    handling: str
    steps: tuple[str, ...]
    source: str = "<profile>"

    @property
    def units_text(self) -> str:
        """E.g. ``"100-200 berries"``."""
        lo, hi = self.per_sample
        count = f"{lo}" if lo == hi else f"{lo}-{hi}"
        unit = self.unit
        if hi == 1:
            plural = unit
        elif unit.endswith("y") and unit[-2:-1] not in tuple("aeiou"):
            plural = unit[:-1] + "ies"
        else:
            plural = unit + "s"
        return f"{count} {plural}"

    @property
    def instructions(self) -> str:
        """One-line instruction for a point record or a label."""
        lo, hi = self.per_plant
        per_plant = f"{lo}" if lo == hi else f"{lo}-{hi}"
        sides = "both sides of the row" if self.sides == "both" else "one side of the row"
        return (
            f"{self.units_text}, {per_plant} per plant, {sides}; "
            f"mix {'/'.join(self.exposure)} and {'/'.join(self.heights)}; "
            f"skip {self.skip_end_plants} end plant(s) per row and "
            f"{self.skip_border_rows} border row(s)"
        )


def shipped_profiles() -> list[str]:
    """Names of the profiles shipped with fieldplan."""
    folder = resources.files("fieldplan") / "data" / "profiles"
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def _fail(source: str, message: str) -> InputError:
    return InputError(f"crop profile {source}: {message}")


def parse_profile(data: dict, *, source: str = "<profile>") -> CropProfile:
    """Validate a profile read from TOML; raise :class:`InputError` naming the key and the fix."""
    unknown = sorted(set(data) - _KEYS)
    if unknown:
        raise _fail(source, f"unknown key(s) {unknown}; valid keys are {sorted(_KEYS)}")
    missing = sorted(_KEYS - set(data))
    if missing:
        raise _fail(source, f"missing key(s) {missing}; see a shipped profile for an example")
    if data["schema"] != 1:
        raise _fail(source, f"schema = {data['schema']!r} is not supported; use schema = 1")
    for key in sorted(_TEXT):
        if not isinstance(data[key], str) or not data[key].strip():
            raise _fail(source, f"{key} must be a non-empty text, got {data[key]!r}")
    for key in sorted(_RANGES):
        value = data[key]
        if (
            not isinstance(value, list)
            or len(value) != 2
            or not all(isinstance(v, int) and not isinstance(v, bool) for v in value)
            or not 1 <= value[0] <= value[1]
        ):
            raise _fail(
                source, f"{key} must be [fewest, most] whole numbers with 1 <= fewest <= most, got {value!r}"
            )
    for key in sorted(_COUNTS):
        value = data[key]
        if not isinstance(value, int) or isinstance(value, bool) or value < 0:
            raise _fail(source, f"{key} must be a whole number >= 0, got {value!r}")
    for key in sorted(_LISTS):
        value = data[key]
        if (
            not isinstance(value, list)
            or not value
            or not all(isinstance(v, str) and v.strip() for v in value)
        ):
            raise _fail(source, f"{key} must be a non-empty list of texts, got {value!r}")
    if data["sides"] not in SIDES:
        raise _fail(source, f"sides must be one of {', '.join(SIDES)}, got {data['sides']!r}")
    if data["per_plant"][0] > data["per_sample"][1]:
        raise _fail(source, "per_plant asks for more units from one plant than per_sample allows in all")
    return CropProfile(
        name=data["name"].strip(),
        title=data["title"].strip(),
        basis=data["basis"].strip(),
        unit=data["unit"].strip(),
        per_sample=tuple(data["per_sample"]),
        per_plant=tuple(data["per_plant"]),
        skip_end_plants=data["skip_end_plants"],
        skip_border_rows=data["skip_border_rows"],
        sides=data["sides"],
        exposure=tuple(v.strip() for v in data["exposure"]),
        heights=tuple(v.strip() for v in data["heights"]),
        handling=data["handling"].strip(),
        steps=tuple(v.strip() for v in data["steps"]),
        source=source,
    )


def load_profile(name_or_path: str | Path) -> CropProfile:
    """Load a shipped profile by name, or a user's TOML file by path.

    Examples
    --------
    >>> load_profile("wine-grapes").per_sample
    (100, 200)
    """
    text_name = str(name_or_path)
    if text_name in shipped_profiles():
        ref = resources.files("fieldplan") / "data" / "profiles" / f"{text_name}.toml"
        raw, source = ref.read_bytes(), f"{text_name} (shipped)"
    else:
        path = Path(name_or_path)
        if not path.is_file():
            raise InputError(
                f"crop profile {text_name!r} is neither a shipped profile "
                f"({', '.join(shipped_profiles())}) nor a readable file; check the name or path"
            )
        raw, source = path.read_bytes(), str(path)
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise _fail(source, f"not valid UTF-8 TOML ({err}); fix the file's syntax") from None
    return parse_profile(data, source=source)
