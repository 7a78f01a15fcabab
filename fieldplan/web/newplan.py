"""New plans from the browser: read an uploaded block file, preview a plan, save it.

The steps are those of ``fieldplan plan`` (``fieldplan.cli.plan_cmd.run_plan``):
the same :class:`fieldplan.spec.PlanSpec` checks, the same reader, the same
``make_plan`` and ``write_plan``, so a plan saved here has the same point files
as the command gives for the same file, parameters and seed.

Parameters that name files on the server (``exclude``, ``rows``, ``cautions``,
a crop profile given as a TOML path) are never taken from a form: a browser could
otherwise make the server read any file. Exclusions come as a second upload.
``engine``/``scheduler`` stay with the server's default (in process).
"""

from __future__ import annotations

import inspect
import json
import math
from pathlib import Path
from typing import Any

import numpy as np

from fieldplan.web.uploads import Staged
from fieldplan.web.workspace import WebError, plan_dir, plan_lock

__all__ = [
    "FORM_EXCLUDED",
    "ROLES",
    "form_schema",
    "describe_upload",
    "build_spec",
    "plan_from_upload",
    "preview_payload",
    "save_plan",
]

#: Spec parameters the web form does not offer (files on the server, where the work runs); every
#: parameter of kind "path" is left out too (see :func:`server_side`).
FORM_EXCLUDED = (
    "exclude", "rows", "cautions", "engine", "scheduler", "zones", "covariates", "cost_covariate", "revisit",
)  # fmt: skip


def server_side() -> tuple[str, ...]:
    """Parameters a browser may not set: :data:`FORM_EXCLUDED` and every file path of the spec."""
    from fieldplan.spec import spec_schema

    paths = [f["name"] for f in spec_schema()["fields"] if f["kind"] == "path"]
    return tuple(dict.fromkeys([*FORM_EXCLUDED, *paths]))


#: Column roles a user can map file columns to (the reader's names for them).
ROLES = (
    ("block", "Block id"),
    ("variety", "Variety"),
    ("row_spacing", "Row spacing"),
    ("plant_spacing", "Plant spacing"),
    ("row_bearing", "Row bearing (degrees)"),
    ("crop", "Crop"),
)
_ROLE_COLUMN = {
    "variety": "variety",
    "row_spacing": "row_spacing_m",
    "plant_spacing": "plant_spacing_m",
    "row_bearing": "row_bearing_deg",
    "crop": "crop",
}
_UNIT_M = {"m": 1.0, "ft": 0.3048, "yd": 0.9144}  # reference: international yard and pound (1959)
MAX_TABLE_ROWS = 500


def form_schema() -> dict:
    """The spec's own field descriptions (``fieldplan.spec.spec_schema``) minus server-side files."""
    from fieldplan.spec import spec_schema

    schema = spec_schema()
    hidden = server_side()
    schema["fields"] = [f for f in schema["fields"] if f["name"] not in hidden]
    schema["roles"] = [{"role": r, "title": t} for r, t in ROLES]
    schema["crop_profiles"] = _profile_names()
    schema["not_offered"] = list(hidden)
    return schema


def _profile_names() -> list[str]:
    from importlib import resources

    folder = resources.files("fieldplan") / "data" / "profiles"
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def _json_cell(value):
    if value is None:
        return None
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, int | bool | str):
        return value
    return str(value)


def describe_upload(staged: Staged, *, layer: str | None = None) -> dict:
    """What the new-plan page shows of an upload: outlines, attribute table, columns, checks."""
    import pyogrio
    import shapely

    from fieldplan.errors import FieldplanError
    from fieldplan.read import read_blocks, read_frame

    layers = None
    if staged.path.suffix == ".gpkg":
        layers = [row[0] for row in pyogrio.list_layers(staged.path)]
    try:
        frame = read_frame(staged.path, layer=layer)
    except FieldplanError as err:
        raise WebError(
            422, str(err).replace(str(staged.path), staged.original_name), parameter="file"
        ) from None
    columns = [c for c in frame.columns if c != "geometry"]
    wgs = frame.to_crs(4326) if frame.crs is not None and not frame.crs.is_geographic else frame
    geoms = shapely.transform(np.asarray(wgs.geometry.values, dtype=object), lambda c: np.round(c, 7))
    geoms = shapely.force_2d(geoms)
    features = []
    table = []
    records = wgs[columns].to_dict("records") if columns else [{}] * len(wgs)
    for i, (geom, rec) in enumerate(zip(geoms, records, strict=True)):
        props = {k: _json_cell(v) for k, v in rec.items()}
        if i < MAX_TABLE_ROWS:
            table.append(props)
        if geom is None or shapely.is_empty(geom):
            continue
        features.append(
            {
                "type": "Feature",
                "properties": {"_row": i + 1, **props},
                "geometry": shapely.geometry.mapping(geom),
            }
        )
    check = {"ok": True, "message": "", "parameter": None, "notes": [], "id_field": None}
    try:
        blocks = read_blocks(staged.path, layer=layer)
        # Kept for the preview when it reads the file the same way (most previews do).
        staged.info[_read_key({"layer": layer, "id_field": None, "repair": False})] = blocks
        check["notes"] = list(blocks.attrs.get("notes", []))
        check["id_field"] = blocks.attrs.get("id_field")
        check["blocks"] = int(len(blocks))
        check["area_ha"] = round(float(shapely.area(blocks.geometry.values).sum()) / 1e4, 2)
    except FieldplanError as err:
        check.update(ok=False, message=_own_name(str(err), staged), parameter=getattr(err, "param", None))
    if len(wgs):
        w, s, e, n = (float(v) for v in wgs.total_bounds)
    else:
        w, s, e, n = -0.001, -0.001, 0.001, 0.001
    return {
        "upload": staged.id,
        "file": staged.original_name,
        "layers": layers,
        "features": len(frame),
        "columns": columns,
        "rows": table,
        "rows_shown": len(table),
        "outline": {"type": "FeatureCollection", "features": features},
        "bounds": [[s, w], [n, e]],
        "check": check,
    }


def _own_name(message: str, staged: Staged) -> str:
    return message.replace(str(staged.path), staged.original_name)


def build_spec(params: dict):
    """A :class:`PlanSpec` from form values; server-side file parameters are refused (400)."""
    from fieldplan.spec import PlanSpec

    if not isinstance(params, dict):
        raise WebError(422, "params must be a JSON object of plan parameters", parameter="params")
    for name in server_side():
        if params.get(name) not in (None, "", [], {}) and not (
            name == "engine" and params.get(name) == "local"
        ):
            raise WebError(
                400,
                f"{name} names a file or service on the server and cannot be set from the workspace"
                + ("; upload exclusions beside the blocks instead" if name == "exclude" else ""),
                parameter=name,
            )
    profile = params.get("crop_profile")
    if profile not in (None, "") and profile not in _profile_names():
        raise WebError(
            400,
            f"crop_profile {profile!r} is not one of {', '.join(_profile_names())} (profile files are for the CLI)",
            parameter="crop_profile",
        )
    values = {k: v for k, v in params.items() if v is not None and v != ""}
    return PlanSpec.from_dict(values)


def _read(staged: Staged, spec, exclusions: Staged | None):
    from fieldplan.read import read_blocks, read_exclusions, select_blocks

    options = spec.input.read_options()
    mapped = options.pop("columns", None) if "columns" not in _reader_params() else None
    unit = options.pop("length_unit", "m") if "length_unit" not in _reader_params() else "m"
    if mapped and "block" in mapped and options.get("id_field") is None:
        options["id_field"] = mapped.pop("block")
    key = _read_key(options)
    blocks = staged.info.get(key)
    if blocks is None:
        blocks = read_blocks(staged.path, **options)
        staged.info[key] = blocks
    attrs = dict(blocks.attrs)
    blocks = blocks.copy()
    blocks.attrs.update(attrs)
    # The manifest names the file the user gave, not the private upload folder.
    from fieldplan.write.safe import safe_filename

    blocks.attrs["source"] = safe_filename(Path(staged.original_name).name, default="blocks")
    if mapped:
        blocks = _apply_roles(blocks, mapped, unit)
    if spec.input.select is not None:
        blocks = select_blocks(blocks, spec.input.select)
    excl = read_exclusions(exclusions.path, crs=blocks.crs) if exclusions is not None else None
    return blocks, excl


def _read_key(options: dict) -> str:
    return "read:" + json.dumps(options, sort_keys=True, default=str)


def _reader_params() -> set[str]:
    from fieldplan.read import read_blocks

    return set(inspect.signature(read_blocks).parameters)


def _apply_roles(blocks, mapped: dict, unit: str):
    """Column roles for a reader that does not map them itself: copy SOURCE into the role's column."""
    import pandas as pd

    from fieldplan.errors import InputError

    out = blocks.copy()
    out.attrs.update(blocks.attrs)
    for role, source in mapped.items():
        target = _ROLE_COLUMN.get(role, role)
        if source not in out.columns:
            raise InputError(f"columns: the file has no column {source!r} for {role}")
        values = out[source]
        if target.endswith("_m"):
            values = pd.to_numeric(values, errors="coerce") * _UNIT_M.get(unit, 1.0)
        elif target.endswith("_deg"):
            values = pd.to_numeric(values, errors="coerce")
        else:
            values = values.astype(object).where(values.notna(), None)
        out[target] = values.to_numpy()
    return out


def plan_from_upload(
    staged: Staged, params: dict, *, seed: int, exclusions: Staged | None = None, progress=None
):
    """Read, check and plan as ``fieldplan plan`` does; nothing is written. Returns the Plan."""
    from fieldplan.engine import check_engine
    from fieldplan.plan import make_plan
    from fieldplan.safety import set_cautions
    from fieldplan.samples.purpose import check_samples

    spec = build_spec(params)
    check_samples(spec.samples)  # a missing crop profile fails before any work
    check_engine(spec.scale.engine, spec.scale.scheduler)
    if exclusions is not None:
        # The plan records its exclusions file as the CLI does (by the name it was given), so the
        # plan code, and with it every sample id, matches `fieldplan plan --exclude NAME` run
        # beside that file.
        from fieldplan.write.safe import safe_filename

        spec = spec.replace(
            exclude=safe_filename(Path(exclusions.original_name).name, default="exclusions.geojson")
        )
    blocks, excl = _read(staged, spec, exclusions)
    plan = make_plan(
        blocks,
        spec,
        seed=int(seed),
        exclusions=excl,
        command=cli_command(spec, blocks.attrs["source"], seed=int(seed)),
        progress=progress,
    )
    set_cautions(plan, None)
    return plan


def cli_command(spec, blocks_name: str, *, seed: int, out: str = "PLAN_FOLDER") -> list[str]:
    """The ``fieldplan plan`` command giving the same points, for the manifest and README.

    Only parameters that differ from their defaults are spelled out, with the CLI's flags.
    """
    from fieldplan.spec import flag_of, spec_schema

    defaults = {f["name"]: f["default"] for f in spec_schema()["fields"]}
    args = ["fieldplan", "plan", blocks_name]
    for name, value in spec.to_dict().items():
        default = defaults.get(name)
        if isinstance(value, tuple):
            value = list(value)
        if value is None or value == default or (isinstance(value, dict | list) and not value):
            continue
        if isinstance(value, bool):
            if value:
                args.append(flag_of(name))
            continue
        if isinstance(value, dict):
            for role, source in value.items():
                args += [flag_of(name), f"{role}={source}"]
            continue
        if isinstance(value, list):
            value = ",".join(str(v) for v in value)
        if isinstance(value, float) and value.is_integer():
            value = int(value)
        args += [flag_of(name), str(value)]
    return [*args, "--seed", str(int(seed)), "--out", out]


def preview_payload(plan) -> dict:
    """What the preview shows: the map layers, counts per block, notes and flags."""
    from fieldplan.web.service import records
    from fieldplan.write.html_map import map_data

    data = map_data(plan, markers="auto")
    blocks = plan.blocks
    cols = [c for c in ("block", "area_ha", "n_points", "stratum", "flags") if c in blocks.columns]
    per_block = records(blocks[cols]) if cols else []
    n_spare = int(plan.points["status"].eq("spare").sum()) if "status" in plan.points.columns else 0
    return {
        "map": data,
        "points": int(len(plan.points) - n_spare),
        "spares": n_spare,
        "blocks": int(len(blocks)),
        "per_block": per_block,
        "notes": list(plan.meta.get("notes", [])),
        "parameters": json.loads(json.dumps(plan.params, default=str)),
    }


def save_plan(plan, workspace: Path, name: str, *, formats=None) -> Path:
    """Write ``plan`` as the new plan folder ``name`` (refused if it exists: 409)."""
    from fieldplan.store import write_plan

    folder = plan_dir(workspace, name)
    with plan_lock(folder):
        write_plan(plan, folder, force=False, formats=formats)
    return folder


def spec_formats(params: dict) -> list[str] | None:
    spec = build_spec(params)
    return list(spec.outputs.formats)


def params_hash(params: dict, seed: int, upload: str, exclusions: str | None) -> str:
    import hashlib

    text = json.dumps(
        {"p": params, "s": int(seed), "u": upload, "e": exclusions}, sort_keys=True, default=str
    )
    return hashlib.sha256(text.encode()).hexdigest()


def as_params(values: Any) -> dict:
    """Parameters from a JSON text (multipart) or a dict (JSON body)."""
    if isinstance(values, str):
        try:
            values = json.loads(values) if values.strip() else {}
        except ValueError as err:
            raise WebError(422, f"params is not valid JSON ({err})", parameter="params") from None
    if not isinstance(values, dict):
        raise WebError(422, "params must be a JSON object of plan parameters", parameter="params")
    return values
