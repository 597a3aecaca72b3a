"""A wrong secret for a known key id costs the same work as an unknown id (#13 item 9).

Promise: README "API keys" (the secret's hash is compared in constant time) and OWASP's
authentication advice (no answer or timing may tell a known account from an unknown
one). Checked by the work done, not by timing: both paths hash the given secret once and
compare two 64-digit hashes once, with the same functions.
"""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from service.access import auth
from tests.plugins.storage import Database, make_key

pytestmark = pytest.mark.storage


def test_a_wrong_secret_and_an_unknown_id_do_the_same_work(
    client: TestClient, db: Database, monkeypatch: pytest.MonkeyPatch
) -> None:
    hashed: list[str] = []
    compared: list[tuple[int, int]] = []
    real_hash, real_verify = auth.hash_secret, auth.verify

    def counting_hash(secret: str) -> str:
        hashed.append(secret)
        return real_hash(secret)

    def counting_verify(expected: str, given: str) -> bool:
        compared.append((len(expected), len(given)))
        return real_verify(expected, given)

    monkeypatch.setattr(auth, "hash_secret", counting_hash)
    monkeypatch.setattr(auth, "verify", counting_verify)
    key_id = make_key(db.settings, "read").split("_")[1]
    hashed.clear()
    secret = "x" * 43
    work = {}
    for name, token in (
        ("wrong secret", f"mk_{key_id}_{secret}"),
        ("unknown id", f"mk_ffffffffffff_{secret}"),
    ):
        hashed.clear()
        compared.clear()
        answer = client.get("/v1/products", headers={"Authorization": f"Bearer {token}"})
        assert answer.status_code == 401, answer.text
        assert answer.json()["detail"] == "the API key is unknown or revoked"
        # (The process's cache of verified keys also hashes the whole header, alike.)
        secrets_hashed = [s for s in hashed if not s.startswith("Bearer ")]
        work[name] = (len(hashed), secrets_hashed, list(compared))
    assert work["wrong secret"] == work["unknown id"], work
    assert work["unknown id"][1:] == ([secret], [(64, 64)]), work
    # The dummy hash is a real SHA-256 shape that no secret sent here matches.
    assert len(auth.DUMMY_HASH) == 64 and real_hash(secret) != auth.DUMMY_HASH
