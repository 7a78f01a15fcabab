"""The JSON API the pages use, open to other tools (schema at ``/api/openapi.json``).

Every change calls the same library functions as the matching CLI command, under
the plan's lock, so the plan folder (events table, results layer, files) is the
same whichever way a change was made.
"""

from __future__ import annotations

from fastapi import APIRouter, Request

from fieldplan.web.workspace import WebError, existing_plan_dir, list_plans, plan_summary

__all__ = ["router"]

router = APIRouter(prefix="/api")


@router.get("/session", summary="CSRF token of this session (send it as X-CSRF-Token on changes)")
def session(request: Request) -> dict:
    return {"csrf": request.state.csrf, "token_required": bool(request.app.state.token)}


@router.get("/plans", summary="Plans of the workspace, newest first")
def get_plans(request: Request) -> dict:
    return {"plans": list_plans(request.app.state.workspace)}


@router.get("/plans/{name}", summary="One plan: summary, parameters and its map layers")
def get_plan(request: Request, name: str) -> dict:
    folder = existing_plan_dir(request.app.state.workspace, name)
    return {"plan": plan_summary(folder)}


@router.get("/jobs/{job_id}", summary="Progress and outcome of a long plan run")
def get_job(request: Request, job_id: str) -> dict:
    job = request.app.state.jobs.get(job_id)
    if job is None:
        raise WebError(
            404, f"no job {job_id!r} (finished jobs are forgotten after a while)", parameter="job_id"
        )
    return job.to_dict()
