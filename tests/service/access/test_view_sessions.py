"""The analyst view's sessions end on the server at sign-out, and sign-in refuses posts
from other sites (#13 item 9), on SQLite and PostgreSQL.

Promises: README "The analyst view" (signing out ends the session: a copied cookie stops
working; sign-in only from this site's own page) and the OWASP cross-site request forgery
advice (check Origin, and Referer when a browser sends no Origin).
"""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from fastapi.testclient import TestClient
from pydantic import SecretStr

from service.access.view_session import COOKIE_NAME
from service.core.app import create_app
from service.core.settings import Settings
from tests.plugins.storage import Database, make_key

pytestmark = pytest.mark.storage
SECRET = "a view secret of more than thirty-two characters"


@pytest.fixture
def view_settings(db: Database) -> Settings:
    return db.settings.model_copy(update={"session_secret": SecretStr(SECRET)})


@pytest.fixture
def view(view_settings: Settings) -> Iterator[TestClient]:
    with TestClient(create_app(view_settings), raise_server_exceptions=False) as client:
        yield client


def _sign_in(client: TestClient, key: str, **headers: str) -> object:
    return client.post(
        "/ui/sign-in", data={"key": key, "next": "/ui/"}, headers=headers, follow_redirects=False
    )


def _cookie_of(response: object) -> str:
    header: str = response.headers["set-cookie"]  # type: ignore[attr-defined]
    assert header.startswith(f"{COOKIE_NAME}="), header
    return header.split(";")[0].split("=", 1)[1]


def _admitted(client: TestClient, cookie: str) -> bool:
    client.cookies.clear()
    client.cookies.set(COOKIE_NAME, cookie)
    answer = client.get("/ui/", follow_redirects=False)
    assert answer.status_code in (200, 303), answer.text
    return answer.status_code == 200


def test_a_copied_cookie_stops_working_at_sign_out(
    view: TestClient, view_settings: Settings
) -> None:
    key = make_key(view_settings, "read", name="analyst")
    cookie = _cookie_of(_sign_in(view, key))
    with TestClient(view.app) as other:  # the copy, in another browser
        assert _admitted(other, cookie)
        out = view.post("/ui/sign-out", follow_redirects=False)
        assert out.status_code == 303
        assert not _admitted(other, cookie), "the copied cookie still works after sign-out"
        # The original is refused as well, and signing in again gives a working session.
        assert not _admitted(view, cookie)
        fresh = _cookie_of(_sign_in(other, key))
        assert _admitted(other, fresh)
        # Signing out with an ended cookie ends nothing more.
        view.cookies.clear()
        view.cookies.set(COOKIE_NAME, cookie)
        assert view.post("/ui/sign-out", follow_redirects=False).status_code == 303
        assert _admitted(other, fresh)


@pytest.mark.parametrize(
    ("headers", "admitted"),
    [
        ({"Referer": "https://elsewhere.example/ui/sign-in"}, False),
        ({"Referer": "http://testserver.elsewhere.example/ui/sign-in"}, False),
        ({"Origin": "null"}, False),
        ({"Origin": "https://elsewhere.example", "Referer": "http://testserver/ui/"}, False),
        ({"Referer": "http://testserver/ui/sign-in?next=/ui/"}, True),
        ({"Origin": "http://testserver"}, True),
        ({}, True),
    ],
)
def test_sign_in_is_refused_from_another_site(
    view: TestClient, view_settings: Settings, headers: dict[str, str], admitted: bool
) -> None:
    key = make_key(view_settings, "read")
    answer = _sign_in(view, key, **headers)
    if admitted:
        assert answer.status_code == 303, answer.text  # type: ignore[attr-defined]
    else:
        assert answer.status_code == 403, answer.text  # type: ignore[attr-defined]
        assert "set-cookie" not in answer.headers  # type: ignore[attr-defined]
