"""The JSON API the pages use, open to other tools (schema at ``/api/openapi.json``).

Every change calls the same library functions as the matching CLI command, under
the plan's lock, so the plan folder (events table, results layer, files) is the
same whichever way a change was made. Errors are JSON: ``{"error", "parameter",
"status"}``.
"""

from __future__ import annotations

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


def _folder(request: Request, name: str) -> Path:
    return existing_plan_dir(request.app.state.workspace, name)


@router.get("/session", summary="CSRF token of this session (send it as X-CSRF-Token on changes)")
def session(request: Request) -> dict:
    return {"csrf": request.state.csrf, "token_required": bool(request.app.state.token)}


@router.get("/plans", summary="Plans of the workspace, newest first")
def get_plans(request: Request) -> dict:
    return {"plans": list_plans(request.app.state.workspace)}


@router.get("/plans/{name}", summary="One plan: summary, parameters, map layers, files, crews")
def get_plan(request: Request, name: str) -> dict:
    return service.plan_detail(_folder(request, name))


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
    )


@router.post("/plans/{name}/results", summary="Store a results table as the next round (fieldplan results)")
def post_results(
    request: Request,
    name: str,
    file: Annotated[
        UploadFile, File(description="Results table (CSV): point_id, value columns, optional date.")
    ],
    value: Annotated[list[str] | None, Form(description="Value columns to import (default all).")] = None,
    allow_duplicate: Annotated[
        bool, Form(description="Import a file already imported, as a new round.")
    ] = False,
    max_offset: Annotated[
        float | None, Form(ge=0, description="Metres from the planned spot before a sample is flagged.")
    ] = None,
) -> dict:
    from fieldplan.write.safe import safe_filename

    folder = _folder(request, name)
    original = file.filename or "results.csv"
    if Path(original).suffix.lower() not in (".csv", ".txt", ".tsv"):
        raise WebError(415, f"{original!r}: give the results as a CSV table (.csv)", parameter="file")
    data = read_capped(file.file, request.app.state.max_upload_bytes)
    if not data:
        raise WebError(422, f"{original!r}: the file is empty", parameter="file")
    tmp = Path(tempfile.mkdtemp(prefix="fieldplan-results-"))
    try:
        # The stored round names its source file: keep the sender's name, made safe.
        path = tmp / safe_filename(Path(original).name, default="results.csv")
        path.write_bytes(data)
        values = [v for item in (value or []) for v in str(item).split(",") if v.strip()]
        return service.import_results(
            folder, path, value=values or None, allow_duplicate=allow_duplicate, max_offset=max_offset
        )
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


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


@router.get("/plans/{name}/estimates", summary="Estimates with confidence intervals (fieldplan estimate)")
def get_estimates(
    request: Request,
    name: str,
    value: Annotated[str, Query(min_length=1, max_length=100, description="Variable, e.g. brix.")],
    by: Annotated[Literal["block", "stratum", "variety", "farm"], Query()] = "block",
    confidence: Annotated[float, Query(gt=0, lt=1)] = 0.95,
    target: Annotated[float | None, Query(description="Adds P(mean >= target) and a projected date.")] = None,
    local_variance: Annotated[bool, Query()] = False,
) -> dict:
    folder = _folder(request, name)
    return service.estimates(
        folder, value=value, by=by, confidence=confidence, target=target, local_variance=local_variance
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


@router.post("/plans/{name}/labels", summary="Write labels.pdf (fieldplan labels)")
def post_labels(request: Request, name: str, body: LabelsRequest) -> dict:
    return service.make_labels(_folder(request, name), layout=body.layout, date=body.date, skip=body.skip)


class LabSheetRequest(BaseModel):
    analyses: str = Field(min_length=1, max_length=500, description='Comma-separated, e.g. "pH,P,K".')


@router.post("/plans/{name}/lab-sheet", summary="Write lab_submission.csv and results_template.csv")
def post_lab_sheet(request: Request, name: str, body: LabSheetRequest) -> dict:
    return service.make_lab_sheet(_folder(request, name), analyses=body.analyses)


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
