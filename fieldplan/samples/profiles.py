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

Optional keys (the row layout check of block attributes):

crops : list of str
    Values of a block's ``crop`` field this profile applies to (case-insensitive).
row_spacing_m, plant_spacing_m : [float, float]
    Plausible range of the crop's row and plant spacing in metres; a block value
    outside it is refused (feet read as metres must not pass).
spacing_basis : str
    Where the ranges come from (or ``common practice, no source``).
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
_OPTIONAL = {"crops", "row_spacing_m", "plant_spacing_m", "spacing_basis"}
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
    crops: tuple[str, ...] = ()
    row_spacing_m: tuple[float, float] | None = None
    plant_spacing_m: tuple[float, float] | None = None
    spacing_basis: str = ""

    @property
    def units_text(self) -> str:
        """E.g. ``"100-200 berries"``."""
        lo, hi = self.per_sample
        return f"{_span(lo, hi)} {self.unit if hi == 1 else self.plural}"

    @property
    def plural(self) -> str:
        """The unit in the plural ("berries", "fruit")."""
        unit = self.unit
        if unit.endswith("y") and unit[-2:-1] not in tuple("aeiou"):
            return unit[:-1] + "ies"
        return unit if unit.endswith(("fruit", "s")) else unit + "s"

    @property
    def instructions(self) -> str:
        """One-line instruction for a point record or a label."""
        return self.instructions_for()

    def per_plant_for(self, plants: int) -> tuple[int, int, bool]:
        """Units to take from each of ``plants`` plants so the sample lands in ``per_sample``.

        Returns ``(fewest, most, follows)``: ``plants * fewest >= per_sample[0]`` and
        ``plants * most <= per_sample[1]`` whenever whole numbers allow it, within the
        profile's ``per_plant`` range where they overlap; ``follows`` is False when
        the amounts per plant leave the profile's ``per_plant`` range, or when even
        one unit per plant overshoots the sample (more plants than units).

        Examples
        --------
        >>> load_profile("wine-grapes").per_plant_for(5)
        (20, 40, False)
        >>> load_profile("wine-grapes").per_plant_for(80)
        (2, 2, True)
        """
        k = int(plants)
        if k < 1:
            raise ValueError(f"plants must be 1 or more, got {plants}")
        s_lo, s_hi = self.per_sample
        p_lo, p_hi = self.per_plant
        need_lo, need_hi = -(-s_lo // k), s_hi // k
        if need_hi < 1:
            return 1, 1, False
        if need_lo > need_hi:
            # No even amount lands in the range: some plants give one more than others.
            lo, hi = need_hi, need_lo
            return lo, hi, p_lo <= lo and hi <= p_hi
        lo, hi = max(need_lo, p_lo), min(need_hi, p_hi)
        if lo <= hi:
            return lo, hi, True
        return need_lo, need_hi, False

    def instructions_for(
        self,
        *,
        plants: int | None = None,
        skip_end_plants: int | None = None,
        skip_border_rows: int | None = None,
    ) -> str:
        """Instruction for one sample, from the plan's effective options.

        Parameters
        ----------
        plants : int, optional
            Plants the sample is gathered from (a cluster's size); the text then says
            how many units to take from each so the total lands in ``per_sample``.
            Without it, the profile's own ``per_plant``.
        skip_end_plants, skip_border_rows : int, optional
            Plants and rows the plan leaves out (default: the profile's).
        """
        ends = self.skip_end_plants if skip_end_plants is None else int(skip_end_plants)
        border = self.skip_border_rows if skip_border_rows is None else int(skip_border_rows)
        sides = "both sides of the row" if self.sides == "both" else "one side of the row"
        if plants is None:
            lo, hi = self.per_plant
            amount = f"{self.units_text}, {_span(lo, hi)} per plant"
        else:
            lo, hi, _ = self.per_plant_for(plants)
            total = f"{int(plants) * lo}" if lo == hi else f"{int(plants) * lo}-{int(plants) * hi}"
            amount = (
                f"{_span(lo, hi)} {self.unit if hi == 1 else self.plural} from each of the "
                f"{int(plants)} plant(s) ({total} in all; the profile asks {self.units_text})"
            )
        return (
            f"{amount}, {sides}; "
            f"mix {'/'.join(self.exposure)} and {'/'.join(self.heights)}; "
            f"skip {ends} end plant(s) per row and "
            f"{border} border row(s)"
        )

    def cluster_warning(self, plants: int) -> str:
        """Why clusters of ``plants`` plants cannot follow the profile ('' when they can)."""
        lo, hi, follows = self.per_plant_for(plants)
        if follows:
            return ""
        s_lo, s_hi = self.per_sample
        p_lo, p_hi = self.per_plant
        fewest, most = -(-s_lo // p_hi), s_hi // p_lo
        return (
            f"crop profile {self.name}: {self.units_text} from {int(plants)} plant(s) means "
            f"{_span(lo, hi)} per plant, outside the profile's {_span(p_lo, p_hi)} per plant; "
            f"to follow the profile, plan clusters of {fewest}-{most} plants (--plants-per-cluster), or keep these "
            "clusters knowing each plant weighs more in its sample"
        )


def _span(lo: int, hi: int) -> str:
    return f"{lo}" if lo == hi else f"{lo}-{hi}"


def shipped_profiles() -> list[str]:
    """Names of the profiles shipped with fieldplan."""
    folder = resources.files("fieldplan") / "data" / "profiles"
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def _fail(source: str, message: str) -> InputError:
    return InputError(f"crop profile {source}: {message}")


def parse_profile(data: dict, *, source: str = "<profile>") -> CropProfile:
    """Validate a profile read from TOML; raise :class:`InputError` naming the key and the fix."""
    unknown = sorted(set(data) - _KEYS - _OPTIONAL)
    if unknown:
        raise _fail(source, f"unknown key(s) {unknown}; valid keys are {sorted(_KEYS | _OPTIONAL)}")
    spacing = _spacing_keys(data, source)
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
        **spacing,
    )


def _spacing_keys(data: dict, source: str) -> dict:
    """The optional row layout keys, checked."""
    out: dict = {}
    crops = data.get("crops", [])
    if not isinstance(crops, list) or not all(isinstance(v, str) and v.strip() for v in crops):
        raise _fail(source, f"crops must be a list of texts, got {crops!r}")
    out["crops"] = tuple(v.strip() for v in crops)
    for key in ("row_spacing_m", "plant_spacing_m"):
        if key not in data:
            continue
        value = data[key]
        if (
            not isinstance(value, list)
            or len(value) != 2
            or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in value)
            or not 0 < value[0] <= value[1]
        ):
            raise _fail(
                source, f"{key} must be [lowest, highest] metres with 0 < lowest <= highest, got {value!r}"
            )
        out[key] = (float(value[0]), float(value[1]))
    basis = data.get("spacing_basis", "")
    if ("row_spacing_m" in out or "plant_spacing_m" in out) and (
        not isinstance(basis, str) or not basis.strip()
    ):
        raise _fail(source, "spacing_basis must say where the spacing ranges come from")
    out["spacing_basis"] = basis.strip() if isinstance(basis, str) else ""
    return out


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
