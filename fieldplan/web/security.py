"""Access control of the web workspace: access token, session cookies, CSRF, headers, body cap.

Rules
-----
- Bound to a loopback address with no token, any local request is served, but the
  ``Host`` header must name a loopback host (a web page elsewhere cannot reach the
  workspace through DNS rebinding).
- With a token (always when bound beyond loopback), every request must carry it:
  ``Authorization: Bearer TOKEN`` (scripts), ``?token=TOKEN`` once in a link (the
  server answers with a cookie and a redirect to the same page without the token),
  or that cookie. Otherwise 401.
- Requests that change anything (POST, PUT, PATCH, DELETE) need the session's CSRF
  token in an ``X-CSRF-Token`` header, unless they authenticate with the bearer
  header (which a browser never adds by itself). A present ``Origin`` must be ours.
- Paths of the crew companion (``/field/...``, ``/api/field/...``) skip these checks
  and authorise themselves with crew-limited tokens.
- Every answer carries a Content-Security-Policy with no external origin and no
  inline script.
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
import os
import secrets
from pathlib import Path
from urllib.parse import urlencode

__all__ = [
    "AUTH_COOKIE",
    "SESSION_COOKIE",
    "CSRF_HEADER",
    "CSP",
    "SELF_AUTHORISED_PREFIXES",
    "load_secret",
    "new_token",
    "csrf_for",
    "is_loopback_host",
    "BodyLimit",
]

AUTH_COOKIE = "fp_auth"
SESSION_COOKIE = "fp_session"
CSRF_HEADER = "x-csrf-token"
SECRET_NAME = ".fieldplan-web-secret"
#: Paths that authorise themselves (the crew companion's router); see DEVELOPERS.md.
SELF_AUTHORISED_PREFIXES = ("/field/", "/api/field/")
UNSAFE_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})

CSP = (
    "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data: blob:; "
    "connect-src 'self'; font-src 'self'; object-src 'none'; base-uri 'none'; "
    "form-action 'self'; frame-ancestors 'none'"
)
SECURITY_HEADERS = (
    (b"content-security-policy", CSP.encode()),
    (b"x-content-type-options", b"nosniff"),
    (b"referrer-policy", b"no-referrer"),
    (b"x-frame-options", b"DENY"),
    (b"cross-origin-opener-policy", b"same-origin"),
)


def new_token() -> str:
    """A fresh access token: 32 random bytes, URL-safe text."""
    return secrets.token_urlsafe(32)


def load_secret(workspace: Path) -> bytes:
    """The server secret that signs sessions, CSRF tokens and crew links.

    Kept in ``WORKSPACE/.fieldplan-web-secret`` (mode 0600) so links handed out
    (crew links on printed sheets) stay valid when the server restarts. Delete the
    file to revoke every link and session at once.
    """
    path = Path(workspace) / SECRET_NAME
    try:
        data = path.read_bytes()
        if len(data) >= 32:
            return data
    except FileNotFoundError:
        pass
    data = secrets.token_bytes(32)
    tmp = path.with_name(f"{SECRET_NAME}.{os.getpid()}.tmp")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    try:
        os.write(fd, data)
    finally:
        os.close(fd)
    try:
        # Two servers starting at once: the first secret written wins for both.
        os.link(tmp, path)
    except FileExistsError:
        data = path.read_bytes()
    finally:
        tmp.unlink(missing_ok=True)
    return data


def _eq(given: str | None, expected: str | None) -> bool:
    """Constant-time comparison of text from a request (any characters) with a secret value."""
    if not given or not expected:
        return False
    return hmac.compare_digest(given.encode("utf-8", "surrogateescape"), expected.encode("utf-8"))


def _sign(secret: bytes, purpose: str, value: str) -> str:
    return hmac.new(secret, f"{purpose}\0{value}".encode(), hashlib.sha256).hexdigest()


def auth_cookie_value(secret: bytes, token: str) -> str:
    """Cookie proving the token was shown once (the token itself never sits in a cookie)."""
    return _sign(secret, "auth", token)


def csrf_for(secret: bytes, session: str) -> str:
    """CSRF token of a session: pages send it back in the ``X-CSRF-Token`` header."""
    return _sign(secret, "csrf", session)[:40]


def is_loopback_host(host: str) -> bool:
    """True for ``127.0.0.1``, ``::1``, ``localhost`` (a ``Host`` header's name part)."""
    name = host.strip().lower()
    if name.startswith("["):
        name = name[1 : name.find("]")] if "]" in name else name[1:]
    elif name.count(":") == 1:
        name = name.split(":", 1)[0]
    if name in ("localhost", "localhost.") or name.endswith(".localhost"):
        return True
    try:
        return ipaddress.ip_address(name).is_loopback
    except ValueError:
        return False


def _header(scope, name: bytes) -> str | None:
    for key, value in scope.get("headers", ()):
        if key == name:
            return value.decode("latin-1")
    return None


def _cookies(scope) -> dict[str, str]:
    raw = _header(scope, b"cookie") or ""
    out = {}
    for part in raw.split(";"):
        if "=" in part:
            key, _, value = part.strip().partition("=")
            out.setdefault(key, value)
    return out


def _is_self_authorised(path: str) -> bool:
    return path.startswith(SELF_AUTHORISED_PREFIXES)


class Guard:
    """ASGI middleware enforcing the rules in the module docstring."""

    def __init__(self, app, *, secret: bytes, token: str | None, public: bool) -> None:
        self.app = app
        self.secret = secret
        self.token = token
        self.public = public
        self._auth_cookie = auth_cookie_value(secret, token) if token else None

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        path = scope.get("path", "")
        host = _header(scope, b"host") or ""
        if not self.public and not is_loopback_host(host):
            await _plain(send, 421, "This workspace answers only on 127.0.0.1 / localhost.", path)
            return
        cookies = _cookies(scope)
        new_cookies: list[str] = []
        session = cookies.get(SESSION_COOKIE, "")
        if not (16 <= len(session) <= 64 and session.replace("-", "").replace("_", "").isalnum()):
            session = secrets.token_urlsafe(24)
            new_cookies.append(f"{SESSION_COOKIE}={session}; Path=/; HttpOnly; SameSite=Strict")
        scope.setdefault("state", {})
        scope["state"]["session"] = session
        scope["state"]["csrf"] = csrf_for(self.secret, session)
        self_authorised = _is_self_authorised(path)
        bearer_ok = False
        if self.token and not self_authorised:
            authz = _header(scope, b"authorization") or ""
            bearer = authz[7:].strip() if authz[:7].lower() == "bearer " else ""
            bearer_ok = _eq(bearer, self.token)
            cookie_ok = _eq(cookies.get(AUTH_COOKIE, ""), self._auth_cookie)
            query_token = _query_token(scope)
            if query_token is not None and _eq(query_token, self.token):
                if scope["method"] in ("GET", "HEAD"):
                    # Trade the token in the link for a cookie and drop it from the address bar.
                    new_cookies.append(f"{AUTH_COOKIE}={self._auth_cookie}; Path=/; HttpOnly; SameSite=Lax")
                    await _redirect(send, _without_token(scope), new_cookies)
                    return
                cookie_ok = True
            if not (bearer_ok or cookie_ok):
                await _plain(
                    send,
                    401,
                    "This workspace needs its access link: open the address printed by "
                    "'fieldplan serve' (it ends in ?token=...).",
                    path,
                    extra=[(b"www-authenticate", b'Bearer realm="fieldplan"')],
                )
                return
        if scope["method"] in UNSAFE_METHODS and not self_authorised and not bearer_ok:
            origin = _header(scope, b"origin")
            if origin is not None and origin != "null" and not _same_origin(origin, host):
                await _plain(send, 403, "Cross-site request refused (Origin is not this workspace).", path)
                return
            sent = _header(scope, CSRF_HEADER.encode()) or ""
            if not (cookies.get(SESSION_COOKIE) == session and _eq(sent, scope["state"]["csrf"])):
                await _plain(
                    send,
                    403,
                    "CSRF check failed: reload the page and try again "
                    "(scripts: send the X-CSRF-Token from GET /api/session, or the bearer token).",
                    path,
                    parameter="X-CSRF-Token",
                )
                return

        async def send_with_headers(message):
            if message["type"] == "http.response.start":
                headers = list(message.get("headers", []))
                present = {k.lower() for k, _ in headers}
                headers += [(k, v) for k, v in SECURITY_HEADERS if k not in present]
                headers += [(b"set-cookie", c.encode("latin-1")) for c in new_cookies]
                if b"cache-control" not in present:
                    # Scripts and styles may be kept and revalidated (ETag); pages and data never kept.
                    headers.append(
                        (b"cache-control", b"no-cache" if path.startswith("/static/") else b"no-store")
                    )
                message = {**message, "headers": headers}
            await send(message)

        await self.app(scope, receive, send_with_headers)


def _same_origin(origin: str, host: str) -> bool:
    from urllib.parse import urlsplit

    parts = urlsplit(origin)
    return parts.scheme in ("http", "https") and parts.netloc.lower() == host.lower()


def _query_token(scope) -> str | None:
    from urllib.parse import parse_qsl

    query = scope.get("query_string", b"").decode("latin-1")
    for key, value in parse_qsl(query, keep_blank_values=True):
        if key == "token":
            return value
    return None


def _without_token(scope) -> str:
    from urllib.parse import parse_qsl, quote

    query = scope.get("query_string", b"").decode("latin-1")
    rest = [(k, v) for k, v in parse_qsl(query, keep_blank_values=True) if k != "token"]
    path = quote(scope.get("path", "/"))
    return path + ("?" + urlencode(rest) if rest else "")


async def _redirect(send, location: str, cookies: list[str]) -> None:
    headers = [(b"location", location.encode("latin-1")), (b"content-length", b"0")]
    headers += [(b"set-cookie", c.encode("latin-1")) for c in cookies]
    headers += list(SECURITY_HEADERS) + [(b"cache-control", b"no-store")]
    await send({"type": "http.response.start", "status": 303, "headers": headers})
    await send({"type": "http.response.body", "body": b""})


async def _plain(send, status: int, message: str, path: str, *, parameter=None, extra=()) -> None:
    """An error as JSON (API paths) or as a short text page."""
    import json

    if path.startswith("/api/"):
        body = json.dumps({"error": message, "parameter": parameter, "status": status}).encode()
        ctype = b"application/json"
    else:
        body = message.encode("utf-8")
        ctype = b"text/plain; charset=utf-8"
    headers = [(b"content-type", ctype), (b"content-length", str(len(body)).encode())]
    headers += list(SECURITY_HEADERS) + [(b"cache-control", b"no-store"), *extra]
    await send({"type": "http.response.start", "status": status, "headers": headers})
    await send({"type": "http.response.body", "body": body})


class BodyLimit:
    """ASGI middleware: refuse request bodies over ``max_bytes`` with 413, before parsing.

    A declared ``Content-Length`` over the cap is refused at once; a body sent in
    chunks is counted as it arrives and the request is cut off at the cap.
    """

    def __init__(self, app, *, max_bytes: int) -> None:
        self.app = app
        self.max_bytes = int(max_bytes)

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        mb = self.max_bytes / 1e6
        message = f"Upload too large: the limit is {mb:g} MB (fieldplan serve --max-upload-mb)."
        declared = _header(scope, b"content-length")
        if declared is not None:
            try:
                too_big = int(declared) > self.max_bytes
            except ValueError:
                too_big = True
            if too_big:
                await _plain(send, 413, message, scope.get("path", ""), parameter="file")
                return
        state = {"seen": 0, "over": False, "started": False}

        async def counted_receive():
            msg = await receive()
            if msg["type"] == "http.request":
                state["seen"] += len(msg.get("body", b""))
                if state["seen"] > self.max_bytes:
                    state["over"] = True
                    return {"type": "http.disconnect"}
            return msg

        async def guarded_send(msg):
            if state["over"]:
                return
            if msg["type"] == "http.response.start":
                state["started"] = True
            await send(msg)

        try:
            await self.app(scope, counted_receive, guarded_send)
        except Exception:
            if not state["over"]:
                raise
        if state["over"] and not state["started"]:
            await _plain(send, 413, message, scope.get("path", ""), parameter="file")
