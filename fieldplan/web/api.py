"""The JSON API the pages use, open to other tools (schema at ``/api/openapi.json``).

Every change calls the same library functions as the matching CLI command, under
the plan's lock, so the plan folder (events table, results layer, files) is the
same whichever way a change was made. Errors are JSON: ``{"error", "parameter",
"status"}``.
"""

from __future__ import annotations

import json
import shutil
import tempfile
from pathlib import Path
from typing import Annotated, Literal

from fastapi import APIRouter, File, Form, Query, Request, UploadFile
from fastapi.responses import FileResponse
from pydantic import BaseModel, Field
from starlette.background import BackgroundTask
from starlette.concurrency import run_in_threadpool

from fieldplan.web import service
from fieldplan.web.uploads import read_capped
from fieldplan.web.workspace import WebError, existing_plan_dir, list_plans, plan_lock, plan_summary

__all__ = ["router"]

router = APIRouter(prefix="/api")


def _json(payload, status: int = 200):
    """A JSON answer built by ``json.dumps``: payloads here are JSON-ready already, and FastAPI's
    generic encoder walks every coordinate of a large plan (seconds for a 1,000-block preview)."""
    from fastapi.responses import Response

    return Response(_dumps(payload), status_code=status, media_type="application/json")


def _dumps(payload) -> bytes:
    """Compact JSON; a NaN or infinity left anywhere becomes null (JSON has neither)."""
    try:
        return json.dumps(payload, separators=(",", ":"), allow_nan=False, default=str).encode()
    except ValueError:
        return json.dumps(_finite(payload), separators=(",", ":"), allow_nan=False, default=str).encode()


def _finite(value):
    import math

    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def _folder(request: Request, name: str) -> Path:
    return existing_plan_dir(request.app.state.workspace, name)


@router.get("/session", summary="CSRF token of this session (send it as X-CSRF-Token on changes)")
def session(request: Request) -> dict:
    return {"csrf": request.state.csrf, "token_required": bool(request.app.state.token)}


@router.get("/plans", summary="Plans of the workspace, newest first")
def get_plans(request: Request) -> dict:
    return {"plans": list_plans(request.app.state.workspace)}


@router.get("/plans/{name}", summary="One plan: summary, parameters, map layers, files, crews")
def get_plan(request: Request, name: str):
    from fastapi.responses import Response

    folder = _folder(request, name)
    base = str(request.base_url).rstrip("/")
    # The answer depends only on the folder's files: kept until one of them changes.
    key = (str(folder), base, hash(request.app.state.secret), service.folder_stamp(folder))
    cached = _DETAILS.get(str(folder))
    if cached is not None and cached[0] == key:
        return Response(cached[1], media_type="application/json")
    detail = service.plan_detail(folder)
    detail["crew_links"] = service.crew_links(folder, base, request.app.state.secret)
    detail["conflicts"] = service.conflicts(folder)
    # Already JSON-ready: skip FastAPI's generic encoder, which costs more than the plan itself.
    body = _dumps(detail)
    _DETAILS[str(folder)] = (key, body)
    return Response(body, media_type="application/json")


_DETAILS: dict[str, tuple[tuple, bytes]] = {}


class DuplicateRequest(BaseModel):
    """Next season's plan: the same recipe and blocks under a new name."""

    name: str = Field(min_length=1, max_length=64, description="Name of the new plan folder.")
    seed: int | None = Field(default=None, ge=0, description="Default: the plan's seed (the same sites).")


@router.post("/plans/{name}/duplicate", status_code=202, summary="Next season's plan from this plan's recipe")
def post_duplicate(request: Request, name: str, body: DuplicateRequest) -> dict:
    from fieldplan.web.workspace import check_plan_name

    folder = _folder(request, name)
    new_name = check_plan_name(body.name, parameter="name")
    workspace = request.app.state.workspace

    def run(progress):
        return service.duplicate(folder, workspace, new_name, seed=body.seed, progress=progress)

    job = request.app.state.jobs.submit("duplicate", run)
    return {"job": job.id, "status_url": f"/api/jobs/{job.id}"}


class CrewsRequest(BaseModel):
    """Options of ``fieldplan crews``, same names and defaults."""

    crews: int = Field(ge=1, le=200, description="Number of crews.")
    start: list[float] | None = Field(
        default=None,
        min_length=2,
        max_length=2,
        description="Drop-off [lon, lat] where every crew begins (click the map on the plan page).",
    )
    walk_speed: float = Field(default=4.0, ge=0.1, le=20, description="Walking speed, km/h.")
    minutes_per_point: float = Field(default=5.0, ge=0.0, le=600, description="Minutes spent at each point.")
    max_hours: float | None = Field(default=None, ge=0.1, le=24 * 14, description="Longest day of a crew.")
    return_to_start: bool = Field(default=False, description="Crews walk back to the drop-off.")
    across_rows: float = Field(default=1.5, ge=1.0, le=20, description="How much slower crossing rows is.")
    force: bool = Field(default=False, description="Replace crews assigned before.")


@router.post("/plans/{name}/crews", summary="Assign points to crews and route them (fieldplan crews)")
def post_crews(request: Request, name: str, body: CrewsRequest) -> dict:
    folder = _folder(request, name)
    return service.assign_crews(
        folder,
        crews=body.crews,
        start=tuple(body.start) if body.start else None,
        walk_speed=body.walk_speed,
        minutes_per_point=body.minutes_per_point,
        max_hours=body.max_hours,
        return_to_start=body.return_to_start,
        across_rows=body.across_rows,
        force=body.force,
        # Phones reach a server listening beyond this machine: the sheets then carry crew links.
        link_base=str(request.base_url).rstrip("/") if request.app.state.public else None,
    )


@router.post("/plans/{name}/results", summary="Store a results table as the next round (fieldplan results)")
def post_results(
    request: Request,
    name: str,
    file: Annotated[
        UploadFile, File(description="Results table (CSV or .xlsx): point_id or sample_id, values, date.")
    ],
    value: Annotated[list[str] | None, Form(description="Value columns to import (default all).")] = None,
    allow_duplicate: Annotated[
        bool, Form(description="Import a file already imported, as a new round.")
    ] = False,
    max_offset: Annotated[
        float | None, Form(ge=0, description="Metres from the planned spot before a sample is flagged.")
    ] = None,
    sheet: Annotated[str | None, Form(max_length=100, description="Sheet of an .xlsx workbook.")] = None,
    date_format: Annotated[
        str | None,
        Form(max_length=40, description="Dates that are not ISO: dmy, mdy or a pattern like %d.%m.%Y."),
    ] = None,
    accept_outliers: Annotated[
        bool, Form(description="Store values far from the rest of the round.")
    ] = False,
    positions: Annotated[
        UploadFile | None, File(description="GPX waypoints named by point id: where samples were taken.")
    ] = None,
) -> dict:
    from fieldplan.web.uploads import check_zip, zip_limit
    from fieldplan.write.safe import safe_filename

    folder = _folder(request, name)
    original = file.filename or "results.csv"
    suffix = Path(original).suffix.lower()
    if suffix not in (".csv", ".txt", ".tsv", ".xlsx"):
        raise WebError(
            415, f"{original!r}: give the results as a CSV table or an .xlsx workbook", parameter="file"
        )
    cap = request.app.state.max_upload_bytes
    data = read_capped(file.file, cap)
    if not data:
        raise WebError(422, f"{original!r}: the file is empty", parameter="file")
    tmp = Path(tempfile.mkdtemp(prefix="fieldplan-results-"))
    try:
        # The stored round names its source file: keep the sender's name, made safe.
        path = tmp / safe_filename(Path(original).name, default="results.csv")
        path.write_bytes(data)
        if suffix == ".xlsx":
            # A workbook is a zip archive: checked like any other before a reader opens it.
            check_zip(path, max_unpacked=zip_limit(cap), parameter="file")
        gpx = None
        if positions is not None and positions.filename:
            if Path(positions.filename).suffix.lower() != ".gpx":
                raise WebError(415, "positions: give GPX waypoints (.gpx)", parameter="positions")
            gpx = tmp / "positions.gpx"
            gpx.write_bytes(read_capped(positions.file, cap, parameter="positions"))
        values = [v for item in (value or []) for v in str(item).split(",") if v.strip()]
        return service.import_results(
            folder,
            path,
            value=values or None,
            allow_duplicate=allow_duplicate,
            max_offset=max_offset,
            sheet=sheet,
            date_format=date_format,
            accept_outliers=accept_outliers,
            positions=gpx,
        )
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


class RemoveRoundRequest(BaseModel):
    """Options of ``fieldplan results --remove-round``."""

    round: int = Field(ge=1, description="Round to take out (kept in layer results_removed).")
    reason: str = Field(default="", max_length=500, description="Why, for the events table.")
    by: str | None = Field(default=None, max_length=120, description="Who.")


@router.post(
    "/plans/{name}/results/remove",
    summary="Take a round out of the results (fieldplan results --remove-round)",
)
def post_remove_round(request: Request, name: str, body: RemoveRoundRequest) -> dict:
    return service.remove_round(_folder(request, name), body.round, reason=body.reason, by=body.by)


class MarksRequest(BaseModel):
    """Options of ``fieldplan mark``."""

    point_ids: list[str] = Field(min_length=1, max_length=10_000, description="Point ids, as in points.csv.")
    action: Literal["inaccessible", "restore"] = Field(default="inaccessible")
    reason: str = Field(default="", max_length=500, description="Why (kept in the plan's events table).")
    by: str | None = Field(default=None, max_length=120, description="Who records this.")


@router.post("/plans/{name}/marks", summary="Mark points inaccessible or restore them (fieldplan mark)")
def post_marks(request: Request, name: str, body: MarksRequest) -> dict:
    folder = _folder(request, name)
    return service.mark(folder, body.point_ids, action=body.action, reason=body.reason, by=body.by)


def _estimates(request, name, value, by, confidence, target, target_below, round_no, local_variance, save):
    folder = _folder(request, name)
    return service.estimates(
        folder,
        value=value,
        by=by,
        confidence=confidence,
        target=target,
        target_below=target_below,
        round_no=round_no,
        local_variance=local_variance,
        save=save,
    )


ValueQ = Annotated[str, Query(min_length=1, max_length=100, description="Variable, e.g. brix.")]
ByQ = Annotated[Literal["block", "stratum", "variety", "farm"], Query()]
ConfidenceQ = Annotated[float, Query(gt=0, lt=1)]
TargetQ = Annotated[float | None, Query(description="Adds P(mean reached target) and a projected date.")]
BelowQ = Annotated[
    bool | None, Query(description="Target reached from above (falling, e.g. acidity); default by variable.")
]
RoundQ = Annotated[
    int | None, Query(alias="round", ge=1, description="Round to report (default the latest).")
]
LocalQ = Annotated[bool, Query()]


@router.get("/plans/{name}/estimates", summary="Estimates with confidence intervals (fieldplan estimate)")
def get_estimates(
    request: Request,
    name: str,
    value: ValueQ,
    by: ByQ = "block",
    confidence: ConfidenceQ = 0.95,
    target: TargetQ = None,
    target_below: BelowQ = None,
    round_no: RoundQ = None,
    local_variance: LocalQ = False,
) -> dict:
    return _estimates(
        request, name, value, by, confidence, target, target_below, round_no, local_variance, False
    )


@router.post("/plans/{name}/estimates", summary="Estimates, also written to estimates.csv (as the CLI does)")
def post_estimates(
    request: Request,
    name: str,
    value: ValueQ,
    by: ByQ = "block",
    confidence: ConfidenceQ = 0.95,
    target: TargetQ = None,
    target_below: BelowQ = None,
    round_no: RoundQ = None,
    local_variance: LocalQ = False,
) -> dict:
    return _estimates(
        request, name, value, by, confidence, target, target_below, round_no, local_variance, True
    )


@router.get("/plans/{name}/coverage", summary="Coverage per block (fieldplan check)")
def get_coverage(
    request: Request,
    name: str,
    min_per_block: Annotated[int, Query(ge=0)] = 1,
    max_gap: Annotated[float | None, Query(gt=0)] = None,
    proportional: Annotated[bool, Query()] = False,
) -> dict:
    folder = _folder(request, name)
    return service.coverage(folder, min_per_block=min_per_block, max_gap=max_gap, proportional=proportional)


class LabelsRequest(BaseModel):
    layout: str = Field(default="a4-3x8", max_length=40, description="a4-3x8, letter-3x10 or COLSxROWS.")
    date: str | None = Field(default=None, max_length=10, description="YYYY-MM-DD printed on every label.")
    skip: int = Field(
        default=0, ge=0, le=1000, description="Label positions already used on the first sheet."
    )
    round: int = Field(default=1, ge=1, le=99, description="Sampling round: later rounds get their own ids.")
    include_spares: bool = Field(
        default=False, description="Add the unused spares after the samples, marked SPARE."
    )


@router.post("/plans/{name}/labels", summary="Write labels.pdf (fieldplan labels)")
def post_labels(request: Request, name: str, body: LabelsRequest) -> dict:
    return service.make_labels(
        _folder(request, name),
        layout=body.layout,
        date=body.date,
        skip=body.skip,
        round_no=body.round,
        include_spares=body.include_spares,
    )


class LabSheetRequest(BaseModel):
    analyses: str = Field(min_length=1, max_length=500, description='Comma-separated, e.g. "pH,P,K".')
    round: int = Field(default=1, ge=1, le=99, description="Sampling round: later rounds get their own ids.")
    include_spares: bool = Field(default=False, description="Add the unused spares after the samples.")


@router.post("/plans/{name}/lab-sheet", summary="Write lab_submission.csv and results_template.csv")
def post_lab_sheet(request: Request, name: str, body: LabSheetRequest) -> dict:
    return service.make_lab_sheet(
        _folder(request, name),
        analyses=body.analyses,
        round_no=body.round,
        include_spares=body.include_spares,
    )


@router.get("/plans/{name}/files", summary="Files of the plan folder")
def get_files(request: Request, name: str) -> dict:
    return {"files": service.plan_files(_folder(request, name))}


@router.get("/plans/{name}/files/{filename}", summary="Download one file of the plan folder")
def get_file(request: Request, name: str, filename: str):
    folder = _folder(request, name)
    # Only names listed from the folder itself are served: no path is built from the request.
    listed = {f["name"] for f in service.plan_files(folder)}
    if filename not in listed:
        raise WebError(404, f"plan {name!r} has no file {filename!r}", parameter="filename")
    return FileResponse(folder / filename, filename=filename, content_disposition_type="attachment")


@router.get("/plans/{name}/zip", summary="The whole plan folder as a zip")
async def get_zip(request: Request, name: str):
    folder = _folder(request, name)
    path = await run_in_threadpool(_zip_folder, folder)
    return FileResponse(
        path,
        filename=f"{folder.name}.zip",
        media_type="application/zip",
        content_disposition_type="attachment",
        background=BackgroundTask(lambda: path.unlink(missing_ok=True)),
    )


def _zip_folder(folder: Path) -> Path:
    import os
    import zipfile

    fd, tmp = tempfile.mkstemp(prefix="fieldplan-zip-", suffix=".zip")
    os.close(fd)
    path = Path(tmp)
    with plan_lock(folder), zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as archive:
        for f in service.plan_files(folder):
            archive.write(folder / f["name"], arcname=f"{folder.name}/{f['name']}")
    return path


@router.get("/jobs/{job_id}", summary="Progress and outcome of a long plan run")
def get_job(request: Request, job_id: str) -> dict:
    job = request.app.state.jobs.get(job_id)
    if job is None:
        raise WebError(
            404, f"no job {job_id!r} (finished jobs are forgotten after a while)", parameter="job_id"
        )
    return job.to_dict()


@router.get("/plans/{name}/summary", summary="The plan's line on the home page", include_in_schema=False)
def get_summary(request: Request, name: str) -> dict:
    return plan_summary(_folder(request, name))


# --- new plans ----------------------------------------------------------------------------------


@router.get("/spec", summary="Plan parameters: choices, defaults, units, help (the CLI's own)")
def get_spec() -> dict:
    from fieldplan.web.newplan import form_schema

    return form_schema()


@router.post(
    "/uploads", status_code=201, summary="Upload a block file (GeoJSON, GeoPackage, zipped Shapefile, KML)"
)
def post_upload(
    request: Request,
    file: Annotated[UploadFile, File(description="Block boundaries or exclusion polygons.")],
    layer: Annotated[str | None, Form(max_length=200, description="GeoPackage layer.")] = None,
) -> dict:
    from fieldplan.web.newplan import describe_upload

    uploads = request.app.state.uploads
    data = read_capped(file.file, request.app.state.max_upload_bytes)
    staged = uploads.stage_blocks(data, file.filename or "")
    try:
        return _json(describe_upload(staged, layer=layer or None), 201)
    except Exception:
        uploads.discard(staged.id)
        raise


@router.get("/uploads/{upload}", summary="An upload again, e.g. another GeoPackage layer")
def get_upload(
    request: Request, upload: str, layer: Annotated[str | None, Query(max_length=200)] = None
) -> dict:
    from fieldplan.web.newplan import describe_upload

    return _json(describe_upload(request.app.state.uploads.get(upload), layer=layer or None))


class PlanRequest(BaseModel):
    """A plan from an earlier upload: the spec's parameters (flat, as ``GET /api/spec`` lists them)."""

    upload: str = Field(min_length=1, max_length=64, description="Id from POST /api/uploads.")
    exclusions: str | None = Field(
        default=None, max_length=64, description="Upload id of exclusion polygons."
    )
    params: dict = Field(default_factory=dict, description="Plan parameters (design, spacing, per_block...).")
    seed: int = Field(default=0, ge=0, description="Seed; same file, parameters and seed give the same plan.")
    name: str | None = Field(default=None, max_length=64, description="Plan folder name (saving only).")


def _previews(request: Request) -> dict:
    state = request.app.state
    if not hasattr(state, "previews"):
        state.previews = {}
    return state.previews


def _planned(request: Request, body: PlanRequest, progress):
    """Plan for ``body``, reusing the preview of the same upload, parameters and seed."""
    from fieldplan.web.newplan import params_hash, plan_from_upload

    uploads = request.app.state.uploads
    staged = uploads.get(body.upload)
    excl = uploads.get(body.exclusions, parameter="exclusions") if body.exclusions else None
    key = params_hash(body.params, body.seed, body.upload, body.exclusions)
    cache = _previews(request)
    plan = cache.get(key)
    if plan is None:
        plan = plan_from_upload(staged, body.params, seed=body.seed, exclusions=excl, progress=progress)
        cache[key] = plan
        while len(cache) > 4:
            cache.pop(next(iter(cache)))
    return plan


@router.post("/previews", status_code=202, summary="Preview a plan (runs in the background; poll the job)")
def post_preview(request: Request, body: PlanRequest) -> dict:
    from fieldplan.web.newplan import build_spec, preview_payload

    build_spec(body.params)  # parameter errors answer at once, naming the parameter
    request.app.state.uploads.get(body.upload)

    def run(progress):
        return preview_payload(_planned(request, body, progress))

    job = request.app.state.jobs.submit("preview", run)
    return {"job": job.id, "status_url": f"/api/jobs/{job.id}"}


@router.post(
    "/plans",
    status_code=202,
    summary="Make and save a plan (JSON with an upload id, or multipart with the file)",
    openapi_extra={
        "requestBody": {
            "content": {
                "application/json": {"schema": PlanRequest.model_json_schema()},
                "multipart/form-data": {
                    "schema": {
                        "type": "object",
                        "required": ["file", "name"],
                        "properties": {
                            "file": {
                                "type": "string",
                                "format": "binary",
                                "description": "Block boundaries.",
                            },
                            "exclusions_file": {"type": "string", "format": "binary"},
                            "name": {"type": "string"},
                            "params": {"type": "string", "description": "Plan parameters as a JSON object."},
                            "seed": {"type": "integer"},
                        },
                    }
                },
            }
        }
    },
)
async def post_plan(
    request: Request, wait: Annotated[bool, Query(description="Answer when saved (201).")] = False
):
    from fieldplan.web.newplan import as_params, build_spec, save_plan, spec_formats
    from fieldplan.web.workspace import check_plan_name, plan_dir

    ctype = request.headers.get("content-type", "")
    uploads = request.app.state.uploads
    staged_here: list[str] = []
    if ctype.startswith("multipart/form-data"):
        form = await request.form(max_files=2, max_fields=20)
        upload = form.get("file")
        if upload is None or isinstance(upload, str):
            raise WebError(422, "file: the block file is missing", parameter="file")
        data = await run_in_threadpool(read_capped, upload.file, request.app.state.max_upload_bytes)
        staged = await run_in_threadpool(uploads.stage_blocks, data, upload.filename or "")
        staged_here.append(staged.id)
        excl_id = None
        excl = form.get("exclusions_file")
        if excl is not None and not isinstance(excl, str) and excl.filename:
            edata = await run_in_threadpool(
                read_capped, excl.file, request.app.state.max_upload_bytes, parameter="exclusions_file"
            )
            estaged = await run_in_threadpool(
                uploads.stage_blocks, edata, excl.filename, parameter="exclusions_file"
            )
            staged_here.append(estaged.id)
            excl_id = estaged.id
        try:
            seed = int(form.get("seed") or 0)
        except ValueError:
            raise WebError(422, "seed must be a whole number", parameter="seed") from None
        body = PlanRequest(
            upload=staged.id, exclusions=excl_id, params=as_params(form.get("params") or "{}"),
            seed=seed, name=str(form.get("name") or ""),
        )  # fmt: skip
    else:
        try:
            raw = await request.json()
        except ValueError:
            raise WebError(
                422, "send JSON (upload id and params) or multipart/form-data with the file", parameter="body"
            ) from None
        from pydantic import ValidationError

        try:
            body = PlanRequest.model_validate(raw)
        except ValidationError as err:
            e = err.errors()[0]
            loc = ".".join(str(p) for p in e.get("loc", ()))
            raise WebError(422, f"{loc}: {e.get('msg')}", parameter=loc or None) from None
    try:
        name = check_plan_name(body.name or "", parameter="name")
        folder = plan_dir(request.app.state.workspace, name)
        if folder.exists() and any(folder.iterdir()):
            raise WebError(
                409, f"a plan named {name!r} exists already; choose another name", parameter="name"
            )
        build_spec(body.params)
        formats = spec_formats(body.params)
        uploads.get(body.upload)
    except BaseException:
        for sid in staged_here:
            uploads.discard(sid)
        raise

    def run(progress):
        try:
            plan = _planned(request, body, progress)
            folder = save_plan(plan, request.app.state.workspace, name, formats=formats)
        finally:
            for sid in staged_here:
                uploads.discard(sid)
        n_spare = int(plan.points["status"].eq("spare").sum()) if "status" in plan.points.columns else 0
        return {
            "name": folder.name,
            "url": f"/plans/{folder.name}",
            "points": int(len(plan.points) - n_spare),
            "spares": n_spare,
            "blocks": int(len(plan.blocks)),
        }

    job = request.app.state.jobs.submit("save", run)
    if wait:
        from fastapi.responses import JSONResponse

        await run_in_threadpool(job.future.result)
        if job.status == "failed":
            return JSONResponse(job.error, status_code=job.error.get("status", 500))
        return JSONResponse(job.result, status_code=201)
    return {"job": job.id, "status_url": f"/api/jobs/{job.id}"}


@router.get("/size", summary="Sample size for a margin of error (fieldplan size), with its formula")
def get_size(
    cv: Annotated[float | None, Query(gt=0, description="Coefficient of variation, percent.")] = None,
    margin: Annotated[float | None, Query(gt=0, description="Margin, percent of the mean (with cv).")] = None,
    sd: Annotated[float | None, Query(gt=0, description="Standard deviation (with margin_abs).")] = None,
    margin_abs: Annotated[float | None, Query(gt=0, description="Margin in the measurement's units.")] = None,
    confidence: Annotated[float, Query(gt=0, lt=1)] = 0.95,
    population: Annotated[int | None, Query(ge=1)] = None,
    units_per_cluster: Annotated[int | None, Query(ge=1)] = None,
    icc: Annotated[float | None, Query(ge=0, le=1)] = None,
    normal: Annotated[bool, Query(description="Normal quantile z instead of Student's t.")] = False,
) -> dict:
    from fieldplan.design.samplesize import sample_size

    relative = cv is not None or margin is not None
    absolute = sd is not None or margin_abs is not None
    if relative == absolute:
        raise WebError(
            422, "give cv with margin (percent of the mean), or sd with margin_abs", parameter="cv"
        )
    if relative and (cv is None or margin is None):
        raise WebError(
            422, "cv and margin go together (both in percent)", parameter="margin" if margin is None else "cv"
        )
    if absolute and (sd is None or margin_abs is None):
        raise WebError(
            422, "sd and margin_abs go together", parameter="margin_abs" if margin_abs is None else "sd"
        )
    result = sample_size(
        margin=margin if relative else margin_abs,
        cv=cv,
        sd=sd,
        confidence=confidence,
        population=population,
        distribution="z" if normal else "t",
        units_per_cluster=units_per_cluster,
        icc=icc,
    )
    return result.to_dict()
