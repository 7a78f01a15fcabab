"""Errors as JSON naming the parameter at fault (API), or as a short page (browser)."""

from __future__ import annotations

import re

__all__ = ["install_error_handlers", "error_payload", "guess_parameter", "scrub"]

_OPTION = re.compile(r"--([a-z][a-z0-9-]*)")
# Private upload folders (uploads.py, api.py): the sender knows the file by its own name only.
_STAGED = re.compile(r"/(?:[^\s'\"]*/)?fieldplan-(?:upload|results)-[A-Za-z0-9_]+/")


def scrub(message: str, workspace=None) -> str:
    """Drop server paths from a message: staged uploads keep their file name, plans their name."""
    text = _STAGED.sub("", str(message))
    if workspace is not None:
        text = text.replace(f"{workspace}/", "").replace(str(workspace), "workspace")
    return text


def guess_parameter(message: str) -> str | None:
    """The first ``--option`` a library message names, as an API parameter (``--per-ha`` -> ``per_ha``)."""
    found = _OPTION.search(message)
    return found.group(1).replace("-", "_") if found else None


def error_payload(status: int, message: str, parameter: str | None, **extra) -> dict:
    return {"error": " ".join(str(message).split()), "parameter": parameter, "status": status, **extra}


def install_error_handlers(app) -> None:
    """Map library errors to 400 (409 for an existing plan, 404 for a missing one), validation to 422."""
    from fastapi.exceptions import RequestValidationError
    from fastapi.responses import JSONResponse
    from starlette.exceptions import HTTPException

    from fieldplan.errors import FieldplanError, OutputExistsError, PlanDirError
    from fieldplan.web.workspace import WebError

    def respond(request, status: int, message: str, parameter: str | None, **extra):
        message = scrub(message, request.app.state.workspace)
        payload = error_payload(status, message, parameter, **extra)
        if request.url.path.startswith("/api/") or "application/json" in request.headers.get("accept", ""):
            return JSONResponse(payload, status_code=status)
        from fieldplan.web.pages import error_page

        return error_page(request, status, payload["error"])

    @app.exception_handler(WebError)
    async def _web(request, err: WebError):
        return respond(request, err.status, str(err), err.parameter, **getattr(err, "extra", {}))

    @app.exception_handler(FieldplanError)
    async def _library(request, err: FieldplanError):
        status = 409 if isinstance(err, OutputExistsError) else 404 if isinstance(err, PlanDirError) else 400
        message = str(err)
        parameter = getattr(err, "parameter", None) or getattr(err, "param", None) or guess_parameter(message)
        return respond(request, status, message, parameter)

    @app.exception_handler(RequestValidationError)
    async def _validation(request, err: RequestValidationError):
        problems = []
        for e in err.errors():
            loc = [str(p) for p in e.get("loc", ()) if p not in ("body", "query", "path", "form")]
            problems.append({"parameter": ".".join(loc) or None, "message": e.get("msg", "")})
        first = problems[0] if problems else {"parameter": None, "message": "invalid request"}
        message = f"{first['parameter']}: {first['message']}" if first["parameter"] else first["message"]
        return respond(request, 422, message, first["parameter"], problems=problems)

    @app.exception_handler(HTTPException)
    async def _http(request, err: HTTPException):
        return respond(request, err.status_code, str(err.detail), None)
