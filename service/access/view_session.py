"""Signed session cookies for the analyst pages.

Signing in exchanges a read key for a cookie that carries only the key's id, signed
with the service's session secret (itsdangerous, timestamped). Every page checks the
key again, so revoking the key ends its sessions at once; the secret itself never
leaves the form post that carried it.
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


def sign(settings: Settings, key_id: str) -> str:
    return _serializer(settings).dumps({"key": key_id})


def key_id_from_cookie(settings: Settings, value: str | None) -> str | None:
    """The key id a valid, unexpired cookie carries; None for anything else."""
    if not value:
        return None
    try:
        data = _serializer(settings).loads(value, max_age=settings.session_max_age_seconds)
    except BadSignature:  # also covers an expired signature
        return None
    key_id = data.get("key") if isinstance(data, dict) else None
    return key_id if isinstance(key_id, str) else None


@dataclass(frozen=True)
class Viewer:
    """Who is looking at the pages: the key's id and name (never its secret)."""

    key_id: str
    name: str


def viewer_for(session: Session, key_id: str | None) -> Viewer | None:
    """The signed-in viewer, if the key still exists, is not revoked and can read."""
    if key_id is None:
        return None
    row = session.get(ApiKeyRow, key_id)
    if row is None or row.revoked_at is not None or "read" not in row.scopes:
        return None
    return Viewer(key_id=row.id, name=row.name)


def check_key(session: Session, key: str) -> tuple[Viewer | None, str]:
    """Validate a key typed into the sign-in form: the viewer, or a reason in words."""
    try:
        principal, _ = auth.authenticate(session, f"Bearer {key.strip()}")
    except Unauthenticated:
        return None, "That key was not accepted: it is unknown, revoked or mistyped."
    if not principal.allows("read"):
        return None, "That key lacks the read scope these pages need."
    return Viewer(key_id=principal.key_id, name=principal.name), ""
