"""The shrunk own-price elasticity beside the product's own, over HTTP."""

from __future__ import annotations

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from models import DemandFit, shrink_own_price
from service.catalogue import demo
from service.core.db import make_engine
from service.core.settings import Settings
from service.core.tables import FitRow, ProductRow
from service.jobs.worker import JobRunner
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage


def _refit_all(client: TestClient, headers: dict[str, str], settings: Settings) -> None:
    """Queue a refit of every product and run it here, as the worker thread would."""
    created = client.post("/v1/jobs", json={"kind": "refit", "scope": "all"}, headers=headers)
    assert created.status_code == 202, created.json()
    engine = make_engine(settings)
    runner = JobRunner(engine, settings)
    while (job_id := runner.claim()) is not None:
        runner.run(job_id)
    engine.dispose()


def _active(settings: Settings) -> tuple[list[DemandFit], dict[str, str]]:
    engine = make_engine(settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.select(FitRow.result, ProductRow.sku, ProductRow.family)
            .join(ProductRow, ProductRow.id == FitRow.product_id)
            .where(FitRow.status == "active")
        ).all()
    engine.dispose()
    fits = [DemandFit.from_dict(r.result) for r in rows]
    return fits, {r.sku: r.family for r in rows if r.family}


@pytest.fixture
def shop(db: Database, client: TestClient, headers: dict[str, str]) -> TestClient:
    demo.load(db.settings, seed=7)
    _refit_all(client, headers, db.settings)
    return client


def test_elasticities_carry_the_shrunk_value_of_every_active_fit(
    shop: TestClient, headers: dict[str, str], db: Database
) -> None:
    body = shop.get("/v1/products/TEA-022/elasticities", headers=headers).json()
    own, shrunk = body["elasticities"][0], body["shrunk"]
    assert own["name"] == "price" and shrunk is not None
    fits, families = _active(db.settings)
    # The same computation by the library on the stored active fits. The spreads are found by
    # a numerical maximum (to about 1e-9 relative), whose last digits move with the order of
    # the fits: hence 1e-6.
    expected = shrink_own_price(fits, families=families).product("TEA-022")
    assert shrunk["value"] == pytest.approx(expected.shrunk, rel=1e-6)
    assert shrunk["std_error"] == pytest.approx(expected.shrunk_std_error, rel=1e-6)
    assert shrunk["std_error"] < own["std_error"]
    assert shrunk["ci_low"] < shrunk["value"] < shrunk["ci_high"]
    assert shrunk["family"] == families["TEA-022"]
    assert shrunk["n_products"] == len(fits)
    assert 0.0 < shrunk["weight_on_family"] < 1.0
    assert shrunk["class"] in ("elastic", "inelastic", "unit-elastic", "unclear", "wrong sign")
    # At another point the shrunk fit is read there too (its own-price row at that point).
    latest = shop.get(
        "/v1/products/TEA-022/elasticities", params={"at": "latest"}, headers=headers
    ).json()
    assert latest["at"] == "latest" and latest["shrunk"]["n_products"] == len(fits)


def test_a_new_active_fit_renews_the_shrinkage(
    shop: TestClient, headers: dict[str, str], db: Database
) -> None:
    before = shop.get("/v1/products/TEA-004/elasticities", headers=headers).json()["shrunk"]
    again = shop.get("/v1/products/TEA-004/elasticities", headers=headers).json()["shrunk"]
    assert again == before
    spec = {  # another spec for another product: log-log instead of the default auto
        "form": "log-log",
        "covariates": ["rival_price", "promo", "ad_spend", "holiday"],
        "log_covariates": ["rival_price", "ad_spend"],
    }
    refit = shop.post("/v1/products/TEA-002/fits", json={"spec": spec}, headers=headers)
    assert refit.json()["status"] == "active", refit.json()
    after = shop.get("/v1/products/TEA-004/elasticities", headers=headers).json()["shrunk"]
    fits, families = _active(db.settings)
    expected = shrink_own_price(fits, families=families).product("TEA-004")
    assert after["value"] == pytest.approx(expected.shrunk, rel=1e-6)
    assert after["value"] != before["value"]


def test_one_unreadable_fit_is_left_out_and_answers_without_shrinkage(
    shop: TestClient, headers: dict[str, str], db: Database
) -> None:
    engine = make_engine(db.settings)
    with engine.begin() as conn:
        row = conn.execute(
            sa.select(FitRow.id, FitRow.result)
            .join(ProductRow, ProductRow.id == FitRow.product_id)
            .where(ProductRow.sku == "TEA-005", FitRow.status == "active")
        ).one()
        result = dict(row.result)
        result["covariance"] = [[None] * len(r) for r in result["covariance"]]  # stored NaN
        conn.execute(sa.update(FitRow).where(FitRow.id == row.id).values(result=result))
    engine.dispose()
    broken = shop.get("/v1/products/TEA-005/elasticities", headers=headers)
    assert broken.status_code == 200, broken.json()
    assert broken.json()["shrunk"] is None
    others = shop.get("/v1/products/TEA-006/elasticities", headers=headers).json()["shrunk"]
    fits, _ = _active(db.settings)
    assert others is not None and others["n_products"] == len(fits) - 1


def test_too_few_fits_give_no_shrunk_value(
    db: Database, client: TestClient, headers: dict[str, str]
) -> None:
    demo.load(db.settings, seed=7)
    for sku in ("TEA-002", "TEA-004"):
        assert client.post(f"/v1/products/{sku}/fits", headers=headers).status_code == 201
    body = client.get("/v1/products/TEA-002/elasticities", headers=headers).json()
    assert body["shrunk"] is None and body["elasticities"][0]["value"] is not None


def test_a_fit_activated_while_reading_gives_the_own_answer(
    shop: TestClient, headers: dict[str, str], monkeypatch: pytest.MonkeyPatch
) -> None:
    from service.estimation import shrinkage

    # The catalogue's snapshot names another fit for the product, on both reads.
    stale = shrinkage.CatalogueShrinkage(None, None, {"TEA-022": -1})
    monkeypatch.setattr(shrinkage, "catalogue_shrinkage", lambda session: stale)
    answer = shop.get("/v1/products/TEA-022/elasticities", headers=headers)
    assert answer.status_code == 200
    assert answer.json()["shrunk"] is None and answer.json()["elasticities"][0]["value"]
