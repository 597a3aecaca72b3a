"""Signed session cookies for the analyst pages.

Signing in exchanges a read key for a cookie that carries only the key's id, signed
with the service's session secret (itsdangerous, timestamped). Every page checks the
key again, so revoking the key ends its sessions at once; the secret itself never
leaves the form post that carried it. The cookie also carries the key's sign-out count:
signing out counts it up, which ends the key's sessions on the server, so a copied cookie
stops working too.
"""

from __future__ import annotations

import contextlib
import os
import secrets
import tempfile
import threading
from dataclasses import dataclass
from pathlib import Path

from itsdangerous import BadSignature, URLSafeTimedSerializer
from sqlalchemy import update
from sqlalchemy.orm import Session

from service.access import auth
from service.core.errors import Unauthenticated
from service.core.settings import Settings
from service.core.tables import ApiKeyRow

COOKIE_NAME = "marginal_session"
_SALT = "marginal.ui.session"
_secret_lock = threading.Lock()
_file_secrets: dict[Path, str] = {}


def session_secret(settings: Settings) -> str:
    """The configured secret, else the one kept in ``session_secret_file``.

    The file is created on first use with 256 random bits (mode 0600); creation is
    atomic (write a temporary file, then hard-link it into place), so workers that start
    together agree on one secret.
    """
    if settings.session_secret is not None:
        return settings.session_secret.get_secret_value()
    path = settings.session_secret_file.resolve()
    with _secret_lock:
        known = _file_secrets.get(path)
        if known is None:
            known = _file_secrets[path] = _read_or_create(path)
    return known


def _read_or_create(path: Path) -> str:
    if not path.exists():
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, temporary = tempfile.mkstemp(dir=path.parent, prefix=".session-secret-")
        try:
            with os.fdopen(fd, "w") as handle:
                handle.write(secrets.token_hex(32) + "\n")
            with contextlib.suppress(FileExistsError):  # another worker was first
                os.link(temporary, path)
        finally:
            os.unlink(temporary)
    value = path.read_text().strip()
    if len(value) < 32:
        raise RuntimeError(f"the session secret in {path} is too short (32 characters at least)")
    return value


def _serializer(settings: Settings) -> URLSafeTimedSerializer:
    return URLSafeTimedSerializer(session_secret(settings), salt=_SALT)


def sign(settings: Settings, viewer: Viewer) -> str:
    return _serializer(settings).dumps({"key": viewer.key_id, "generation": viewer.generation})


@dataclass(frozen=True)
class CookieSession:
    """What a valid cookie says: the key's id and the sign-out count it was signed with."""

    key_id: str
    generation: int


def from_cookie(settings: Settings, value: str | None) -> CookieSession | None:
    """The session a valid, unexpired cookie carries; None for anything else."""
    if not value:
        return None
    try:
        data = _serializer(settings).loads(value, max_age=settings.session_max_age_seconds)
    except BadSignature:  # also covers an expired signature
        return None
    if not isinstance(data, dict):
        return None
    key_id, generation = data.get("key"), data.get("generation")
    if not isinstance(key_id, str) or type(generation) is not int:
        return None
    return CookieSession(key_id=key_id, generation=generation)


@dataclass(frozen=True)
class Viewer:
    """Who is looking at the pages: the key's id and name (never its secret)."""

    key_id: str
    name: str
    generation: int


def viewer_for(session: Session, cookie: CookieSession | None) -> Viewer | None:
    """The signed-in viewer, if the key still exists, is not revoked, can read, and has not
    signed out since the cookie was signed."""
    if cookie is None:
        return None
    row = session.get(ApiKeyRow, cookie.key_id)
    if row is None or row.revoked_at is not None or "read" not in row.scopes:
        return None
    if row.view_generation != cookie.generation:
        return None
    return Viewer(key_id=row.id, name=row.name, generation=row.view_generation)


def end_sessions(session: Session, cookie: CookieSession | None) -> None:
    """Sign out: every view session of the cookie's key ends (its cookies, copies
    included, are refused from now on). A cookie already ended changes nothing."""
    if cookie is None:
        return
    session.execute(
        update(ApiKeyRow)
        .where(ApiKeyRow.id == cookie.key_id, ApiKeyRow.view_generation == cookie.generation)
        .values(view_generation=ApiKeyRow.view_generation + 1)
    )


def check_key(session: Session, key: str) -> tuple[Viewer | None, str]:
    """Validate a key typed into the sign-in form: the viewer, or a reason in words."""
    try:
        principal, _ = auth.authenticate(session, f"Bearer {key.strip()}")
    except Unauthenticated:
        return None, "That key was not accepted: it is unknown, revoked or mistyped."
    if not principal.allows("read"):
        return None, "That key lacks the read scope these pages need."
    row = session.get(ApiKeyRow, principal.key_id)
    generation = row.view_generation if row is not None else 0
    return Viewer(key_id=principal.key_id, name=principal.name, generation=generation), ""
