"""The crew page: one crew's points on a phone, offline all day, records synced exactly once.

Paths (all authorised by the crew token, never by the workspace token)
----------------------------------------------------------------------
- ``GET /field/{plan}/{crew}?t=TOKEN``: redirects to the page's own folder (below).
- ``GET /field/{plan}/{crew}/?t=TOKEN``: the page (static HTML; our scripts do the rest).
- ``GET /field/{plan}/{crew}/manifest.webmanifest?t=TOKEN``: web app manifest (installable;
  its ``start_url`` carries the token so the home-screen icon opens the crew's page).
- ``GET /field/{plan}/{crew}/sw.js``: the service worker, scoped to the crew's folder.
- ``GET /field/static/...``: the page's script, style, icons and Leaflet (from xstatic-leaflet).
- ``GET /api/field/{plan}/{crew}/data?t=TOKEN``: the crew's points in visit order, route,
  block outlines, the spare or substitute each point would bring in, the allowed offset,
  the plan's cautions.
- ``POST /api/field/{plan}/{crew}/records`` (header ``X-Crew-Token``): a batch of records;
  answers what was stored (:func:`fieldplan.field.sync.apply_records`).
- ``GET /api/field/{plan}/conflicts``: conflicts between field records and the office
  (``?crew=K&t=TOKEN`` of any crew of the plan, or the workspace access token as a bearer header).

A wrong or missing token is answered 403; a token is bound to one plan and one crew.
The records endpoint takes its token only from a header, which a page on another
site cannot add, so it needs no CSRF cookie.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

from fastapi import APIRouter, HTTPException, Request
from fastapi.responses import FileResponse, JSONResponse, RedirectResponse, Response

from fieldplan.field.links import check_crew_token

__all__ = ["router", "STATIC_DIR", "crew_data"]

router = APIRouter(tags=["crew page"])

STATIC_DIR = Path(__file__).parent / "static" / "field"
_PLAN_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
_STATIC_TYPES = {
    ".js": "text/javascript; charset=utf-8",
    ".css": "text/css; charset=utf-8",
    ".html": "text/html; charset=utf-8",
    ".png": "image/png",
    ".svg": "image/svg+xml",
}
_LEAFLET_FILES = ("leaflet.js", "leaflet.css")
_ACTIVE = ("selected", "replacement", "substitute")
_MAX_SYNC_BYTES = 5_000_000
# Scripts and styles change only with a new fieldplan version; the service worker keeps them.
_STATIC_CACHE = "public, max-age=3600"


def _forbidden(message: str = "This crew link does not open this page; ask for the crew's own link.") -> None:
    raise HTTPException(status_code=403, detail=message)


def _plan_dir(request: Request, plan: str) -> Path:
    if not _PLAN_NAME.match(plan) or ".." in plan:
        raise HTTPException(status_code=404, detail=f"no plan named {plan!r}")
    root = Path(request.app.state.workspace).resolve()
    path = (root / plan).resolve()
    if path.parent != root or not (path / "plan.gpkg").is_file():
        raise HTTPException(status_code=404, detail=f"no plan named {plan!r} in this workspace")
    return path


def _token(request: Request, *, header_only: bool = False) -> str:
    sent = request.headers.get("x-crew-token", "")
    if not sent and not header_only:
        sent = request.query_params.get("t", "")
    return sent


def _authorise(request: Request, plan: str, crew: int, *, header_only: bool = False) -> Path:
    """The plan folder, if the request carries crew ``crew``'s token of ``plan`` (403 otherwise)."""
    if not check_crew_token(request.app.state.secret, plan, crew, _token(request, header_only=header_only)):
        _forbidden()
    return _plan_dir(request, plan)


@router.get("/field/static/{name:path}", include_in_schema=False)
def field_static(name: str) -> Response:
    """The page's own files and Leaflet; a fixed list, never a path built from the request."""
    if name.startswith("leaflet/") and name.split("/", 1)[1] in _LEAFLET_FILES:
        import xstatic.pkg.leaflet as xl

        path = Path(xl.BASE_DIR) / name.split("/", 1)[1]
    else:
        allowed = {p.name: p for p in STATIC_DIR.iterdir() if p.suffix in _STATIC_TYPES}
        path = allowed.get(name)
        if path is None:
            raise HTTPException(status_code=404, detail="no such file")
    return FileResponse(path, media_type=_STATIC_TYPES[path.suffix], headers={"cache-control": _STATIC_CACHE})


@router.get("/field/{plan}/{crew}", include_in_schema=False)
def crew_link_redirect(request: Request, plan: str, crew: int) -> Response:
    """The printed link without the trailing slash: on to the page's folder (the worker's scope)."""
    _authorise(request, plan, crew)
    target = f"/field/{plan}/{crew}/?t={_token(request)}"
    return RedirectResponse(target, status_code=307)


@router.get("/field/{plan}/{crew}/", include_in_schema=False)
def crew_page(request: Request, plan: str, crew: int) -> Response:
    _authorise(request, plan, crew)
    return FileResponse(STATIC_DIR / "crew.html", media_type=_STATIC_TYPES[".html"])


@router.get("/field/{plan}/{crew}/sw.js", include_in_schema=False)
def service_worker(plan: str, crew: int) -> Response:
    # The worker holds no data and no token of its own; it learns both from its page.
    return FileResponse(
        STATIC_DIR / "sw.js",
        media_type=_STATIC_TYPES[".js"],
        headers={"cache-control": "no-cache", "service-worker-allowed": f"/field/{plan}/{crew}/"},
    )


@router.get("/field/{plan}/{crew}/manifest.webmanifest", include_in_schema=False)
def manifest(request: Request, plan: str, crew: int) -> Response:
    _authorise(request, plan, crew)
    scope = f"/field/{plan}/{crew}/"
    body = {
        "name": f"{plan}: crew {crew}",
        "short_name": f"Crew {crew}",
        "description": "Walk to each sample point, record the sample, sync when there is signal.",
        "start_url": f"{scope}?t={_token(request)}",
        "scope": scope,
        "display": "standalone",
        "orientation": "portrait",
        "background_color": "#000000",
        "theme_color": "#000000",
        "icons": [
            {"src": "/field/static/icon-192.png", "sizes": "192x192", "type": "image/png"},
            {"src": "/field/static/icon-512.png", "sizes": "512x512", "type": "image/png", "purpose": "any"},
        ],
    }
    return Response(json.dumps(body), media_type="application/manifest+json")


def crew_data(plan_dir: Path, crew: int) -> dict:
    """What crew ``crew``'s page needs to work all day without a signal.

    Points are the crew's own in visit order, plus any spare or substitute that already
    replaced one of them (placed right after it), plus the crew's points marked
    inaccessible (shown as done). Every number comes from the plan folder as the CLI left it.
    """
    import numpy as np
    import pandas as pd
    import shapely
    from pyproj import Transformer

    from fieldplan.field.positions import default_max_offset
    from fieldplan.field.sync import (
        REASONS,
        field_conflicts,
        journal_records,
        point_labels,
        read_journal,
        replacement_offers,
    )
    from fieldplan.results import PLAUSIBLE_RANGES
    from fieldplan.safety import plan_cautions
    from fieldplan.store import load_plan
    from fieldplan.write.tables import points_lonlat

    plan = load_plan(plan_dir)
    points = plan.points.reset_index(drop=True)
    if "crew" not in points.columns:
        raise HTTPException(status_code=404, detail="this plan has no crews yet; run 'fieldplan crews' first")
    crew_col = pd.to_numeric(points["crew"], errors="coerce").fillna(0).astype(int).to_numpy()
    if not (crew_col == crew).any():
        raise HTTPException(status_code=404, detail=f"this plan has no crew {crew}")
    status = (
        points["status"].fillna("selected").astype(str).to_numpy()
        if "status" in points.columns
        else np.full(len(points), "selected", dtype=object)
    )
    ids = points["point_id"].astype(str).to_numpy()
    order = pd.to_numeric(points["visit_order"], errors="coerce").fillna(0).to_numpy(dtype=float)
    mine = crew_col == crew
    events = plan.layers.get("events")
    if events is not None and len(events):
        ev = pd.DataFrame(events)
        ev = ev[(ev["action"] == "inaccessible") & ev["point_id"].astype(str).isin(set(ids[mine]))]
        pos = {p: i for i, p in enumerate(ids)}
        for point, repl in zip(
            ev["point_id"].astype(str), ev["replacement_id"].fillna("").astype(str), strict=True
        ):
            j = pos.get(repl)
            if j is not None and not mine[j] and status[j] in _ACTIVE:
                mine[j] = True
                order[j] = order[pos[point]] + 0.5
    keep = np.flatnonzero(mine & np.isin(status, [*_ACTIVE, "inaccessible"]))
    keep = keep[np.argsort(order[keep], kind="stable")]
    sub = points.iloc[keep]
    lonlat = points_lonlat(sub) if len(sub) else np.empty((0, 2))
    offers = replacement_offers(plan, ids[keep].tolist())
    labels = point_labels(plan)

    def text(row, column: str) -> str:
        value = row.get(column)
        return "" if value is None or (isinstance(value, float) and not np.isfinite(value)) else str(value)

    out_points = []
    for n, ((_, row), (lon, lat)) in enumerate(zip(sub.iterrows(), lonlat, strict=True), start=1):
        pid = str(row["point_id"])
        out_points.append(
            {
                "n": n,
                "point_id": pid,
                "block": text(row, "block"),
                "sample_id": text(row, "sample_id"),
                "labels": labels.get(pid, []),
                "status": str(status[keep[n - 1]]),
                "lon": round(float(lon), 7),
                "lat": round(float(lat), 7),
                "instructions": text(row, "instructions"),
                "row": text(row, "row"),
                "plant": text(row, "plant"),
                "offer": _with_labels(offers.get(pid), labels),
            }
        )
    to_wgs = Transformer.from_crs(plan.crs, "EPSG:4326", always_xy=True)

    def lonlat_coords(geom) -> list:
        xy = shapely.get_coordinates(geom)
        lon, lat = to_wgs.transform(xy[:, 0], xy[:, 1])
        return [[round(float(a), 7), round(float(b), 7)] for a, b in zip(lon, lat, strict=True)]

    route: list = []
    routes = plan.layers.get("routes")
    if routes is not None and len(routes):
        routes = routes.set_crs(plan.crs, allow_override=True) if hasattr(routes, "set_crs") else routes
        hit = routes[pd.to_numeric(routes["crew"], errors="coerce") == crew]
        if len(hit) and hit.geometry.iloc[0] is not None:
            route = lonlat_coords(hit.geometry.iloc[0])
    blocks = plan.blocks
    names = set(sub["block"].astype(str)) if "block" in sub.columns else set()
    outlines = []
    for name, geom in zip(blocks["block"].astype(str), blocks.geometry.values, strict=True):
        if name not in names or geom is None:
            continue
        rings = [lonlat_coords(r) for r in shapely.get_parts(shapely.boundary(geom))]
        outlines.append({"block": name, "rings": rings})
    purpose = str(plan.params.get("purpose", "general"))
    journal = journal_records(read_journal(plan_dir))
    recorded = sorted({r["point_id"] for r in journal if not r.get("problem")})
    return {
        "plan": plan_dir.name,
        "plan_id": str(plan.params.get("plan_id") or plan.meta.get("plan_id") or plan_dir.name),
        "crew": int(crew),
        "purpose": purpose,
        "variable": "brix" if purpose == "ripeness" else "",
        "variables": sorted(PLAUSIBLE_RANGES),
        "ranges": {k: list(v) for k, v in PLAUSIBLE_RANGES.items()},
        "max_offset_m": float(default_max_offset(plan.params)),
        "points": out_points,
        "route": route,
        "blocks": outlines,
        "reasons": list(REASONS),
        "cautions": plan_cautions(plan),
        "recorded": recorded,
        "conflicts": [c for c in field_conflicts(plan_dir) if c["point_id"] in set(ids[keep])],
    }


def _with_labels(offer: dict | None, labels: dict) -> dict | None:
    """An offer with the bag labels of its replacement, so the phone checks that bag too."""
    if not offer or not offer.get("replacement_id"):
        return offer
    return {**offer, "labels": labels.get(offer["replacement_id"], [])}


@router.get("/api/field/{plan}/{crew}/data")
def field_data(request: Request, plan: str, crew: int) -> JSONResponse:
    """The crew's points, route, blocks, offers and cautions (crew token as ``?t=`` or ``X-Crew-Token``)."""
    plan_dir = _authorise(request, plan, crew)
    return JSONResponse(crew_data(plan_dir, crew), headers={"cache-control": "no-cache"})


@router.post("/api/field/{plan}/{crew}/records")
async def field_records(request: Request, plan: str, crew: int) -> JSONResponse:
    """Store a batch of records (``{"records": [...]}``); the answer lists what was stored.

    Safe to repeat: records the plan already holds (same UUID) are listed as
    ``duplicates`` and add nothing.
    """
    from starlette.concurrency import run_in_threadpool

    from fieldplan.errors import FieldplanError
    from fieldplan.field.sync import apply_records

    plan_dir = _authorise(request, plan, crew, header_only=True)
    body = await request.body()
    if len(body) > _MAX_SYNC_BYTES:
        raise HTTPException(status_code=413, detail="too many records in one upload; sync more often")
    try:
        payload = json.loads(body or b"{}")
    except (json.JSONDecodeError, UnicodeDecodeError):
        raise HTTPException(status_code=400, detail="the body is not JSON") from None
    records = payload.get("records") if isinstance(payload, dict) else None
    if not isinstance(records, list):
        raise HTTPException(status_code=400, detail='send {"records": [...]}')
    try:
        report = await run_in_threadpool(apply_records, plan_dir, records, crew=crew)
    except FieldplanError as err:
        return JSONResponse({"error": str(err), "parameter": "records", "status": 400}, status_code=400)
    return JSONResponse(report.as_dict())


def _office_allowed(request: Request) -> bool:
    """The workspace's own users: its access token as a bearer header, or its login cookie.

    A workspace started without a token serves loopback hosts only (its guard), so anyone
    who reaches it is at the office machine.
    """
    import hmac

    from fieldplan.web.security import AUTH_COOKIE, auth_cookie_value

    token = getattr(request.app.state, "token", None)
    if not token:
        return True
    authz = request.headers.get("authorization", "")
    bearer = authz[7:].strip() if authz[:7].lower() == "bearer " else ""
    if bearer and hmac.compare_digest(bearer, token):
        return True
    cookie = request.cookies.get(AUTH_COOKIE, "")
    return bool(cookie) and hmac.compare_digest(cookie, auth_cookie_value(request.app.state.secret, token))


@router.get("/api/field/{plan}/conflicts")
def field_conflicts_api(request: Request, plan: str) -> JSONResponse:
    """Conflicts between field records, and with points marked inaccessible at the office.

    Open to the workspace's users and to any crew of the plan (``?crew=K&t=TOKEN``).
    """
    from fieldplan.field.sync import conflict_notes, field_conflicts

    token = _token(request)
    crew = request.query_params.get("crew", "")
    allowed = (
        bool(token) and crew.isdigit() and check_crew_token(request.app.state.secret, plan, int(crew), token)
    )
    if not (allowed or _office_allowed(request)):
        _forbidden("Conflicts need a crew link of this plan or the workspace's access token.")
    plan_dir = _plan_dir(request, plan)
    return JSONResponse(
        {"plan": plan, "conflicts": field_conflicts(plan_dir), "notes": conflict_notes(plan_dir)}
    )


@router.get("/api/field/{plan}/links")
def crew_links(request: Request, plan: str, base: str | None = None) -> JSONResponse:
    """Each crew's page address with its QR code (SVG), for the plan page (workspace users only).

    ``base`` is the address the phones reach this server at (default: the one this request
    used; a server bound to 127.0.0.1 is not reachable from a phone, see docs/crew-page.md).
    """
    import numpy as np
    import pandas as pd
    import segno

    from fieldplan.field.links import crew_link
    from fieldplan.store import load_plan

    if not _office_allowed(request):
        _forbidden("Crew links are for the workspace's users; open the workspace with its access link.")
    plan_dir = _plan_dir(request, plan)
    root = base or str(request.base_url)
    if not root.startswith(("http://", "https://")):
        raise HTTPException(status_code=400, detail="base must start with http:// or https://")
    points = load_plan(plan_dir).points
    crews = (
        sorted(int(k) for k in np.unique(pd.to_numeric(points["crew"], errors="coerce").dropna()) if k > 0)
        if "crew" in points.columns
        else []
    )
    out = []
    for k in crews:
        url = crew_link(root, request.app.state.secret, plan, k)
        svg = segno.make_qr(url, error="m").svg_inline(scale=3, border=4)
        out.append({"crew": k, "url": url, "qr_svg": svg})
    return JSONResponse({"plan": plan, "crews": out})
