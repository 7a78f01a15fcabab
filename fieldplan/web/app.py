"""The workspace application: :func:`create_app` builds it, ``fieldplan serve`` runs it.

Layout of the application
-------------------------
- ``/`` home, ``/plans/{name}`` plan page, ``/new`` new plan (``pages.py``)
- ``/api/...`` JSON API (``api.py``), schema at ``/api/openapi.json``, docs at ``/api/docs``
- ``/static/...`` our own CSS and scripts, ``/static/leaflet/...`` Leaflet from ``xstatic-leaflet``
- extra routers (:data:`EXTRA_ROUTERS`): modules exporting ``router`` (an ``APIRouter``),
  included when the module can be imported. ``fieldplan.web.field`` (the crew companion,
  ``/field/...`` and ``/api/field/...``) is one; its paths pass the access-token and CSRF
  checks untouched and authorise themselves with crew-limited tokens signed with
  ``app.state.secret``.

``app.state`` holds ``workspace`` (Path), ``secret`` (bytes), ``token`` (str or None),
``public`` (bool), ``max_upload_bytes`` (int), ``jobs`` (background plan runs) and
``uploads`` (files staged between upload and save).
"""

from __future__ import annotations

import contextlib
import importlib
import logging
from pathlib import Path

from fieldplan.web.security import BodyLimit, Guard, load_secret, new_token

__all__ = ["create_app", "EXTRA_ROUTERS", "DEFAULT_MAX_UPLOAD_MB"]

log = logging.getLogger(__name__)

DEFAULT_MAX_UPLOAD_MB = 50.0
#: Modules whose ``router`` is included when they can be imported (see module docstring).
EXTRA_ROUTERS: tuple[str, ...] = ("fieldplan.web.field",)

WEB_DIR = Path(__file__).parent


def _leaflet_dir() -> Path:
    import xstatic.pkg.leaflet as xl

    return Path(xl.BASE_DIR)


def create_app(
    workspace: Path | str,
    *,
    token: str | None = None,
    public: bool = False,
    max_upload_mb: float = DEFAULT_MAX_UPLOAD_MB,
    workers: int = 2,
):
    """Build the ASGI application serving the plan folders in ``workspace``.

    Parameters
    ----------
    workspace : Path
        Folder of plan folders; created if missing. New plans are written here.
    token : str, optional
        Access token every request must carry (bearer header, ``?token=`` once, then
        a cookie). Required when ``public``; one is generated if not given.
    public : bool
        The server listens beyond the loopback interface: a token is enforced and any
        ``Host`` header is accepted. When false, only loopback host names are served.
    max_upload_mb : float
        Largest request body accepted (uploads), in megabytes; larger ones get 413.
    workers : int
        Threads for long plan runs (previews and saves), so other requests stay quick.
    """
    from concurrent.futures import ThreadPoolExecutor

    from fastapi import FastAPI

    from fieldplan import __version__
    from fieldplan.web import api, pages
    from fieldplan.web.errors import install_error_handlers
    from fieldplan.web.jobs import Jobs
    from fieldplan.web.static import install_static
    from fieldplan.web.uploads import Uploads

    workspace = Path(workspace).resolve()
    workspace.mkdir(parents=True, exist_ok=True)
    if public and not token:
        token = new_token()
    secret = load_secret(workspace)

    @contextlib.asynccontextmanager
    async def lifespan(app):
        yield
        # Staged uploads are private temporary files: gone with the server.
        app.state.uploads.close()
        app.state.executor.shutdown(wait=False, cancel_futures=True)

    app = FastAPI(
        lifespan=lifespan,
        title="fieldplan workspace",
        version=__version__,
        summary="Sampling plans for fields, vineyards and orchards: plan folders over HTTP.",
        openapi_url="/api/openapi.json",
        docs_url=None,
        redoc_url=None,
    )
    app.state.workspace = workspace
    app.state.secret = secret
    app.state.token = token
    app.state.public = bool(public)
    app.state.max_upload_bytes = int(max_upload_mb * 1_000_000)
    app.state.executor = ThreadPoolExecutor(max_workers=max(1, workers), thread_name_prefix="fieldplan-job")
    app.state.jobs = Jobs(app.state.executor, workspace=workspace)
    app.state.uploads = Uploads(max_bytes=app.state.max_upload_bytes)

    install_error_handlers(app)
    app.include_router(api.router)
    app.include_router(pages.router)
    for module_name in EXTRA_ROUTERS:
        _include_optional(app, module_name)
    install_static(app, WEB_DIR / "static", _leaflet_dir())

    # The last added runs first: the guard (access, CSRF) answers before any body is read,
    # then the body cap cuts off oversized uploads before anything parses them.
    app.add_middleware(BodyLimit, max_bytes=app.state.max_upload_bytes)
    app.add_middleware(Guard, secret=secret, token=token, public=bool(public))
    return app


def _include_optional(app, module_name: str) -> None:
    """Include ``module_name.router`` if that module exists; a broken module is an error."""
    try:
        module = importlib.import_module(module_name)
    except ModuleNotFoundError as err:
        if err.name != module_name:
            raise
        return
    app.include_router(module.router)
