"""HTML pages: home, plan, new plan. Templates carry no data in scripts: pages fetch the JSON API."""

from __future__ import annotations

from pathlib import Path

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from fieldplan.web.workspace import existing_plan_dir, list_plans

__all__ = ["router", "templates", "error_page"]

router = APIRouter(include_in_schema=False)

_TEMPLATES = None


def templates():
    global _TEMPLATES
    if _TEMPLATES is None:
        from fastapi.templating import Jinja2Templates

        _TEMPLATES = Jinja2Templates(directory=str(Path(__file__).parent / "templates"))
        _TEMPLATES.env.autoescape = True
    return _TEMPLATES


def render(request: Request, name: str, status: int = 200, **context) -> HTMLResponse:
    from fieldplan import __version__
    from fieldplan.safety import CAUTIONS

    base = {
        "csrf": request.state.csrf,
        "version": __version__,
        "workspace": request.app.state.workspace.name,
        "cautions": list(CAUTIONS),
    }
    return templates().TemplateResponse(request, name, {**base, **context}, status_code=status)


def error_page(request: Request, status: int, message: str) -> HTMLResponse:
    return render(request, "error.html", status=status, status_code=status, message=message)


@router.get("/", response_class=HTMLResponse)
def home(request: Request):
    plans = list_plans(request.app.state.workspace)
    return render(request, "home.html", plans=plans, page="home")


@router.get("/plans/{name}", response_class=HTMLResponse)
def plan_page(request: Request, name: str):
    folder = existing_plan_dir(request.app.state.workspace, name)
    from fieldplan.web.workspace import plan_summary

    return render(request, "plan.html", plan=plan_summary(folder), page="plan")


@router.get("/new", response_class=HTMLResponse)
def new_plan_page(request: Request):
    return render(request, "new.html", page="new")


@router.get("/api/docs", response_class=HTMLResponse)
def api_docs(request: Request):
    """The JSON API described from its OpenAPI schema, served with no script (works offline)."""
    schema = request.app.openapi()
    endpoints = []
    for path, methods in schema.get("paths", {}).items():
        for method, op in methods.items():
            params = [
                {
                    "name": p.get("name"),
                    "where": p.get("in"),
                    "required": bool(p.get("required")),
                    "help": (p.get("description") or (p.get("schema") or {}).get("description") or ""),
                }
                for p in op.get("parameters", [])
            ]
            body = op.get("requestBody", {}).get("content", {})
            endpoints.append(
                {
                    "method": method.upper(),
                    "path": path,
                    "summary": op.get("summary", ""),
                    "params": params,
                    "body": sorted(body),
                }
            )
    return render(request, "api.html", endpoints=endpoints, page="api")
