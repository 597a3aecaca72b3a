"""API keys: creation, hashing, verification and the scope check used by routes.

A key looks like ``mk_<id>_<secret>``. Only the SHA-256 of the secret is stored: the
secret has 256 bits of entropy, so a slow password hash would add cost and no safety.
Comparison uses ``hmac.compare_digest`` so timing reveals nothing about the hash.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import hmac
import secrets
import threading
import time
from dataclasses import dataclass
from typing import Literal

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from service.core.errors import Forbidden, NotFound, Unauthenticated
from service.core.tables import ApiKeyRow, as_utc, utcnow

Scope = Literal["read", "write", "admin", "approve"]
SCOPES: tuple[Scope, ...] = ("read", "write", "admin", "approve")
KEY_PREFIX = "mk"


@dataclass(frozen=True)
class Principal:
    """Who is calling: the key's id, name and scopes (never its secret)."""

    key_id: str
    name: str
    scopes: frozenset[str]

    def allows(self, scope: Scope) -> bool:
        # Scopes are independent grants: a key does exactly what its scopes name.
        return scope in self.scopes


@dataclass(frozen=True)
class NewKey:
    row: ApiKeyRow
    secret: str


def hash_secret(secret: str) -> str:
    return hashlib.sha256(secret.encode()).hexdigest()


# Compared with when a key's id is unknown: 64 hex digits no SHA-256 output is known to
# equal (a hash of text no key can contain).
DUMMY_HASH = hashlib.sha256(b"\x00no key has this secret\x00").hexdigest()


def verify(expected: str, given: str) -> bool:
    """Constant-time comparison of two hex hashes."""
    return hmac.compare_digest(expected, given)


def create_key(session: Session, *, name: str, scopes: list[str]) -> NewKey:
    key_id = secrets.token_hex(6)
    secret = secrets.token_urlsafe(32)
    row = ApiKeyRow(
        id=key_id,
        name=name,
        scopes=sorted(set(scopes)),
        secret_hash=hash_secret(secret),
        created_at=utcnow(),
    )
    session.add(row)
    session.flush()
    return NewKey(row=row, secret=f"{KEY_PREFIX}_{key_id}_{secret}")


def list_keys(session: Session) -> list[ApiKeyRow]:
    return list(session.scalars(select(ApiKeyRow).order_by(ApiKeyRow.created_at, ApiKeyRow.id)))


def revoke_key(session: Session, *, key_id: str) -> ApiKeyRow:
    row = session.get(ApiKeyRow, key_id)
    if row is None:
        raise NotFound(f"no API key with id {key_id!r}")
    if row.revoked_at is None:
        row.revoked_at = utcnow()
    verified_keys.forget(key_id)
    return row


class VerifiedKeys:
    """Keys this process verified against the database moments ago.

    Every authenticated request would otherwise spend a database round trip on the key;
    within ``ttl`` seconds of a lookup the answer is reused. Entries are keyed by the
    database and a hash of the whole ``Authorization`` value (never the secret itself),
    so a wrong secret never matches. Revoking a key forgets it here at once; another
    process's copy lapses within ``ttl``.
    """

    _MAX_ENTRIES = 10_000

    def __init__(self) -> None:
        self._items: dict[tuple[str, str], tuple[float, Principal]] = {}
        self._lock = threading.Lock()

    def get(self, database: str, authorization: str, ttl: float) -> Principal | None:
        entry = self._items.get((database, hash_secret(authorization)))
        if entry is None or time.monotonic() - entry[0] >= ttl:
            return None
        return entry[1]

    def put(self, database: str, authorization: str, principal: Principal) -> None:
        now = time.monotonic()
        with self._lock:
            if len(self._items) >= self._MAX_ENTRIES:
                self._items.clear()  # rare, and the next lookups refill it
            self._items[(database, hash_secret(authorization))] = (now, principal)

    def forget(self, key_id: str) -> None:
        with self._lock:
            for item, (_, principal) in list(self._items.items()):
                if principal.key_id == key_id:
                    del self._items[item]


verified_keys = VerifiedKeys()


def parse_token(token: str) -> tuple[str, str] | None:
    parts = token.split("_", 2)
    if len(parts) != 3 or parts[0] != KEY_PREFIX or not parts[1] or not parts[2]:
        return None
    return parts[1], parts[2]


def authenticate(session: Session, authorization: str | None) -> tuple[Principal, bool]:
    """Resolve an ``Authorization: Bearer`` header to a principal, or raise 401.

    Also says whether the key's last-used time is stale enough to be worth a write.
    """
    if not authorization:
        raise Unauthenticated("send an API key as 'Authorization: Bearer <key>'")
    scheme, _, token = authorization.partition(" ")
    parsed = parse_token(token.strip()) if scheme.lower() == "bearer" else None
    row = session.get(ApiKeyRow, parsed[0]) if parsed else None
    # The same work whether the id is known or not: hash what was given and compare it
    # with the stored hash, or with a dummy hash that nothing matches, so a wrong secret
    # and an unknown id cost the same and timing tells neither apart.
    expected = row.secret_hash if row is not None else DUMMY_HASH
    given = hash_secret(parsed[1] if parsed else token)
    if not verify(expected, given) or row is None or row.revoked_at is not None:
        raise Unauthenticated("the API key is unknown or revoked")
    last = row.last_used_at
    # Coarse, so that reads do not write on every request.
    stale = last is None or utcnow() - as_utc(last) > dt.timedelta(minutes=1)
    return Principal(key_id=row.id, name=row.name, scopes=frozenset(row.scopes)), stale


def touch_key(session: Session, *, key_id: str) -> None:
    """Note that the key was used. Never waits for a lock: on PostgreSQL a key row that
    another transaction holds (a revocation) is skipped, and the next request tries again."""
    locked = select(ApiKeyRow.id).where(ApiKeyRow.id == key_id).with_for_update(skip_locked=True)
    session.execute(
        update(ApiKeyRow)
        .where(ApiKeyRow.id.in_(locked.scalar_subquery()))
        .values(last_used_at=utcnow())
    )


def require(principal: Principal, scope: Scope) -> None:
    if not principal.allows(scope):
        raise Forbidden(f"this operation needs the '{scope}' scope")
