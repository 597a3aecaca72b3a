"""The status codes the README and the OpenAPI document promise, at the edges of parsing."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from tests.plugins.storage import Database


@pytest.mark.storage
def test_malformed_json_is_400_with_where(client: TestClient, headers: dict[str, str]) -> None:
    # README "Errors": 400 when the body is not parseable; 422 is for valid JSON that is
    # not a valid request.
    response = client.put(
        "/v1/products/TEA-900",
        content=b'{"name": "Gyokuro", "currency": ',
        headers={**headers, "Content-Type": "application/json"},
    )
    assert response.status_code == 400
    problem = response.json()
    assert response.headers["content-type"].startswith("application/problem+json")
    assert problem["type"].endswith("/bad-request")
    assert problem["detail"].startswith("the body is not valid JSON")
    invalid = client.put("/v1/products/TEA-900", json={"name": 5}, headers=headers)
    assert invalid.status_code == 422


@pytest.mark.storage
def test_a_chunked_body_over_the_limit_is_413(db: Database, headers: dict[str, str]) -> None:
    # README "Errors": 413 whether the body declares its length or streams in chunks.
    from service.core.app import create_app

    settings = db.settings.model_copy(update={"body_limit_bytes": 1_000})
    with TestClient(create_app(settings)) as small:
        chunks = (b'{"observations": [' + b" " * 400 for _ in range(5))
        response = small.post(
            "/v1/products/TEA-001/observations",
            content=chunks,
            headers={**headers, "Content-Type": "application/json"},
        )
        assert "content-length" not in {k.lower() for k in response.request.headers}
        assert response.status_code == 413, response.text
        assert response.json()["type"].endswith("/payload-too-large")
        declared = small.post(
            "/v1/products/TEA-001/observations",
            content=b"x" * 2_000,
            headers={**headers, "Content-Type": "application/json"},
        )
        assert declared.status_code == 413
