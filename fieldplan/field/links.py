"""Crew links: a web address that opens one crew's page of one plan, and nothing else.

A crew link carries a token signed with the workspace's secret (HMAC-SHA256 of
the plan name and the crew number, RFC 2104), so the server can check it
without storing anything, and a crew's token opens neither another crew's
points nor another plan. Deleting the workspace's secret file revokes every
link (and every browser session) at once.

The secret is the one the workspace server uses (``WORKSPACE/.fieldplan-web-secret``,
see ``fieldplan serve``), so links printed by ``fieldplan crews --link-base`` on
the crew sheets and links shown by the server are the same.
"""

from __future__ import annotations

import hashlib
import hmac
from pathlib import Path
from urllib.parse import quote

__all__ = ["TOKEN_CHARS", "crew_token", "check_crew_token", "crew_link", "workspace_secret"]

#: Hex characters kept of the HMAC: 128 bits, short enough for a small QR code.
TOKEN_CHARS = 32


def crew_token(secret: bytes, plan: str, crew: int | str) -> str:
    """The token of crew ``crew`` of plan ``plan`` (hex)."""
    message = f"crew-link\0{plan}\0{int(crew)}".encode()
    return hmac.new(bytes(secret), message, hashlib.sha256).hexdigest()[:TOKEN_CHARS]


def check_crew_token(secret: bytes, plan: str, crew: int | str, token: str | None) -> bool:
    """True when ``token`` is crew ``crew``'s token for plan ``plan`` (constant-time compare)."""
    if not token:
        return False
    return hmac.compare_digest(str(token).strip().lower(), crew_token(secret, plan, crew))


def crew_link(base: str, secret: bytes, plan: str, crew: int | str) -> str:
    """The address a crew opens: ``BASE/field/PLAN/CREW/?t=TOKEN``."""
    root = str(base).rstrip("/")
    return f"{root}/field/{quote(plan, safe='')}/{int(crew)}/?t={crew_token(secret, plan, crew)}"


def workspace_secret(workspace: str | Path) -> bytes:
    """The workspace server's secret (created on first use, as the server would)."""
    from fieldplan.web.security import load_secret

    return load_secret(Path(workspace))
