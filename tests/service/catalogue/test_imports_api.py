"""CSV imports: accepted encodings, counts, product creation, and refusals that write nothing."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from httpx import Response

from service.core.app import create_app
from service.core.settings import Settings
from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage

HEADER = "sku,period,price,units,unit_cost,in_stock,rival_price,promo"
ROWS = [
    "TEA-001,2024-01-01,6.49,120,2.80,true,1.02,0",
    "TEA-001,2024-01-08,5.99,150,2.80,yes,1.01,1",
    "TEA-002,2024-01-01,12.00,40,,,0.99,",
]


def _csv(*lines: str, newline: str = "\n") -> str:
    return newline.join(lines) + newline


def _post(
    client: TestClient,
    headers: dict[str, str],
    body: str | bytes,
    create: bool = True,
    content_type: str = "text/csv",
) -> object:
    return client.post(
        "/v1/imports",
        params={"create_products": str(create).lower()},
        content=body,
        headers={**headers, "content-type": content_type},
    )


def test_import_creates_products_and_is_idempotent(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    first = _post(client, headers, _csv(HEADER, *ROWS))
    assert first.status_code == 200, first.json()
    assert first.json() == {
        "rows": 3,
        "inserted": 3,
        "updated": 0,
        "products_created": ["TEA-001", "TEA-002"],
    }
    again = _post(client, headers, _csv(HEADER, *ROWS))
    assert again.json() == {"rows": 3, "inserted": 0, "updated": 3, "products_created": []}
    assert row_count(db.settings, "observations") == 3
    assert row_count(db.settings, "products") == 2
    history = client.get("/v1/products/TEA-002/observations", headers=headers).json()["items"]
    assert history == [
        {
            "period": "2024-01-01",
            "price": 12.0,
            "units": 40.0,
            "unit_cost": None,
            "in_stock": None,
            "covariates": {"rival_price": 0.99},
            "price_test_id": None,  # no stored price test covers the period
        }
    ]
    first_tin = client.get("/v1/products/TEA-001/observations", headers=headers).json()["items"]
    assert first_tin[1]["covariates"] == {"promo": 1.0, "rival_price": 1.01}
    assert first_tin[1]["in_stock"] is True


def test_bom_and_crlf_are_accepted(client: TestClient, headers: dict[str, str]) -> None:
    body = "\ufeff".encode() + _csv(HEADER, *ROWS, newline="\r\n").encode()
    response = _post(client, headers, body, content_type="text/csv; charset=utf-8")
    assert response.status_code == 200, response.json()
    assert response.json()["rows"] == 3
    covariates = client.get("/v1/products/TEA-001/observations", headers=headers).json()["items"][
        0
    ]["covariates"]
    assert set(covariates) == {"rival_price", "promo"}  # no BOM glued to a name, no "\r"


def test_chunks_commit_together(client: TestClient, headers: dict[str, str], db: Database) -> None:
    # With 2-row chunks the bad row arrives after earlier chunks were written.
    app = create_app(db.settings.model_copy(update={"import_chunk_rows": 2}))
    rows = [f"TEA-100,2023-{m:02d}-01,5.00,10,,,," for m in range(1, 13)]
    rows[9] = "TEA-100,2023-10-01,-5.00,10,,,,"
    with TestClient(app) as small_chunks:
        response = _post(small_chunks, headers, _csv(HEADER, *rows))
    assert response.status_code == 422
    assert response.json()["errors"] == [
        {"line": 11, "column": "price", "message": "price must be a finite number above zero"}
    ]
    assert row_count(db.settings, "observations") == 0
    assert row_count(db.settings, "products") == 0


BAD_FILES = [
    ("unknown sku", _csv(HEADER, *ROWS), False, 2, "sku"),
    ("bad date", _csv(HEADER, ROWS[0], "TEA-001,2024-13-01,6.49,120,,,,"), True, 3, "period"),
    ("negative price", _csv(HEADER, ROWS[0], "TEA-001,2024-01-08,-1,120,,,,"), True, 3, "price"),
    ("price nan", _csv(HEADER, ROWS[0], "TEA-001,2024-01-08,nan,120,,,,"), True, 3, "price"),
    ("price inf", _csv(HEADER, ROWS[0], "TEA-001,2024-01-08,inf,120,,,,"), True, 3, "price"),
    ("negative units", _csv(HEADER, ROWS[0], "TEA-001,2024-01-08,6,-3,,,,"), True, 3, "units"),
    (
        "text covariate",
        _csv(HEADER, ROWS[0], "TEA-001,2024-01-08,6,3,,,high,"),
        True,
        3,
        "rival_price",
    ),
    ("bad flag", _csv(HEADER, ROWS[0], "TEA-001,2024-01-08,6,3,,maybe,,"), True, 3, "in_stock"),
    ("duplicate period", _csv(HEADER, *ROWS, ROWS[0]), True, 5, "period"),
    ("short row", _csv(HEADER, ROWS[0], "TEA-001,2024-01-08,6"), True, 3, None),
    ("missing column", _csv("sku,period,price", "TEA-001,2024-01-01,6"), True, 1, "units"),
    (
        "repeated column",
        _csv("sku,period,price,units,units", "TEA-001,2024-01-01,6,1,1"),
        True,
        1,
        "units",
    ),
    ("empty file", "", True, 1, None),
    ("header only", _csv(HEADER), True, 2, None),
    ("not utf-8", HEADER + "\nTEA-001,2024-01-01,6,1,,,\xff,\n", True, None, None),
]


@pytest.mark.parametrize(
    ("case", "body", "create", "line", "column"), BAD_FILES, ids=[c[0] for c in BAD_FILES]
)
def test_bad_files_write_nothing(
    client: TestClient,
    headers: dict[str, str],
    db: Database,
    case: str,
    body: str,
    create: bool,
    line: int | None,
    column: str | None,
) -> None:
    raw = body.encode("latin-1") if case == "not utf-8" else body.encode()
    response = _post(client, headers, raw, create=create)
    assert response.status_code == 422, (case, response.json())
    assert response.headers["content-type"] == "application/problem+json"
    problem = response.json()
    first = problem["errors"][0]
    if line is not None:
        assert first["line"] == line, problem
    if column is not None:
        assert first["column"] == column, problem
    assert first["message"]
    assert row_count(db.settings, "observations") == 0
    assert row_count(db.settings, "products") == 0


def test_wrong_content_type_is_415(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    response = _post(client, headers, _csv(HEADER, *ROWS), content_type="application/json")
    assert response.status_code == 415
    assert response.headers["content-type"] == "application/problem+json"
    assert row_count(db.settings, "observations") == 0


@pytest.fixture
def tiny_limit_client(db: Database) -> Iterator[TestClient]:
    app = create_app(db.settings.model_copy(update={"import_limit_bytes": 64}))
    with TestClient(app) as client:
        yield client


def test_import_over_limit_is_413(
    tiny_limit_client: TestClient, headers: dict[str, str], db: Database
) -> None:
    body = _csv(HEADER, *ROWS)
    declared = _post(tiny_limit_client, headers, body)
    assert declared.status_code == 413
    assert declared.headers["content-type"] == "application/problem+json"

    def chunks() -> Iterator[bytes]:  # no Content-Length: counted while streaming
        yield body.encode()

    streamed = tiny_limit_client.post(
        "/v1/imports", content=chunks(), headers={**headers, "content-type": "text/csv"}
    )
    assert streamed.status_code == 413
    assert row_count(db.settings, "observations") == 0


def test_line_numbers_count_blank_lines_and_quoted_breaks(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    body = _csv(
        HEADER,
        ROWS[0],
        "",
        'TEA-001,2024-01-08,5.99,150,2.80,yes,"1.01\nwith a break",1',
        "",
        "TEA-001,2024-01-15,5.99,-4,2.80,yes,1.01,1",
    )
    response = _post(client, headers, body)
    assert response.status_code == 422
    found = [(e["line"], e["column"]) for e in response.json()["errors"]]
    assert found == [(5, "rival_price"), (7, "units")]
    assert row_count(db.settings, "observations") == 0


def test_foreign_keys_hold_again_after_an_import(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    assert _post(client, headers, _csv(HEADER, *ROWS)).status_code == 200
    # Deleting a product removes its history through ON DELETE CASCADE, which on SQLite
    # works only while foreign keys are enforced on the connection doing it.
    for _ in range(3):
        assert client.delete("/v1/products/TEA-001", headers=headers).status_code in (204, 404)
    assert row_count(db.settings, "observations") == 1


def test_bulk_sessions_switch_foreign_keys_off_only_inside(tmp_path: Path) -> None:
    import sqlalchemy as sa

    from service.core.db import make_engine, make_session_factory, session_scope

    engine = make_engine(Settings(database_url=f"sqlite:///{tmp_path / 'fk.db'}"))
    with session_scope(make_session_factory(engine, writer=True, bulk_load=True)) as session:
        assert session.execute(sa.text("PRAGMA foreign_keys")).scalar_one() == 0
    with session_scope(make_session_factory(engine, writer=True)) as session:
        assert session.execute(sa.text("PRAGMA foreign_keys")).scalar_one() == 1
    engine.dispose()


def test_covariate_text_is_stored_as_json_numbers(
    client: TestClient, headers: dict[str, str]
) -> None:
    body = _csv(
        "sku,period,price,units,ad_spend,promo",
        "TEA-001,2024-01-01,5,1,1.5e3,01",
        "TEA-001,2024-01-08,5,1,-0.25,1.",
    )
    assert _post(client, headers, body).status_code == 200
    items = client.get("/v1/products/TEA-001/observations", headers=headers).json()["items"]
    assert [i["covariates"] for i in items] == [
        {"ad_spend": 1500.0, "promo": 1.0},
        {"ad_spend": -0.25, "promo": 1.0},
    ]


def test_overflowing_covariate_is_refused(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    body = _csv("sku,period,price,units,ad_spend", "TEA-001,2024-01-01,5,1,1e999")
    response = _post(client, headers, body)
    assert response.status_code == 422
    assert response.json()["errors"][0]["column"] == "ad_spend"
    assert row_count(db.settings, "observations") == 0


@pytest.mark.storage
@pytest.mark.parametrize(
    ("header", "hint"),
    [
        ("sku;period;price;units", "the file looks semicolon-separated"),
        ("SKU,Period,price,units", "column names are lower case: write 'sku', not 'SKU'"),
    ],
)
def test_a_header_that_nearly_fits_says_why(
    client: TestClient, headers: dict[str, str], header: str, hint: str
) -> None:
    body = _csv(header, "TEA-001;2024-01-01;6;1" if ";" in header else "TEA-001,2024-01-01,6,1")
    response = _post(client, headers, body)
    assert isinstance(response, Response) and response.status_code == 422
    assert any(hint in e["message"] for e in response.json()["errors"]), response.json()
