"""``decide_by: calibrated`` over HTTP: each price moves the share of its point move that the
catalogue's spread of moves supports, worked out through the library's own functions.

The invented demo tea shop (seed 7) is the catalogue; the expected figures are recomputed
here from the library (``models.move_evidence``, ``models.catalogue_spread``) on the same
fits and terms, so the test checks the service's plumbing: which products take part, under
which bounds, and how the reach is applied and reported.
"""

from __future__ import annotations

import json
import math

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import text

import models
from service.catalogue import demo
from service.core.db import make_engine, make_session_factory, session_scope
from service.pricing import calibration
from service.pricing.recommendations import move_spread_for
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage


def _answer(client: TestClient, headers: dict[str, str], sku: str, **body: object) -> dict:
    response = client.post(f"/v1/products/{sku}/optimal-price", json=body, headers=headers)
    assert response.status_code == 200, response.text
    return dict(response.json())


FITTED = ("TEA-004", "TEA-010", "TEA-014", "TEA-021", "TEA-025", "TEA-030", "TEA-033", "TEA-038")


def _fit(client: TestClient, headers: dict[str, str], skus: tuple[str, ...]) -> list[str]:
    """Fit the products with the demo's default spec; the skus whose fit became active."""
    active = []
    for sku in skus:
        made = client.post(f"/v1/products/{sku}/fits", json={}, headers=headers)
        assert made.status_code == 201, made.text
        if made.json()["status"] == "active":
            active.append(sku)
    return active


def _library_spread(db: Database) -> float | None:
    """The catalogue spread recomputed from every active fit and its product's terms."""
    engine = make_engine(db.settings)
    with engine.connect() as conn:
        rows = conn.execute(
            text(
                "SELECT p.unit_cost, p.current_price, p.min_price, p.max_price, f.result "
                "FROM products p JOIN fits f ON f.product_id = p.id AND f.status = 'active' "
                "WHERE p.unit_cost IS NOT NULL"
            )
        ).all()
    engine.dispose()
    evidence = []
    for cost, current, low, high, record in rows:
        fit = models.DemandFit.from_dict(json.loads(record) if isinstance(record, str) else record)
        found = models.move_evidence(
            fit,
            unit_cost=cost,
            current_price=current or fit.variable_latest["price"],
            constraints=models.PriceConstraints(min_price=low, max_price=high),
        )
        if found is not None:
            evidence.append(found)
    return models.catalogue_spread(evidence)


def test_calibrated_moves_part_of_the_way_and_says_so(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    calibration.spread_cache.clear()
    demo.load(db.settings, seed=7)
    active = _fit(client, headers, FITTED)
    assert len(active) >= 3
    moved = 0
    for sku in active:
        point = _answer(client, headers, sku, decide_by="point", no_harm_check=False)
        calibrated = _answer(client, headers, sku, decide_by="calibrated")
        assert calibrated["decision_figures"]["decide_by"] == "calibrated"
        current = calibrated["current"]["price"]
        d_point = math.log(point["recommended"]["price"] / current)
        d_cal = math.log(calibrated["recommended"]["price"] / current)
        # Never further than the point move, never the other way (one cent of rounding).
        assert abs(d_cal) <= abs(d_point) + 0.01 / current
        assert d_cal * d_point >= 0.0
        if "catalogue_calibration" in calibrated["binding_constraints"]:
            moved += 1
            assert calibrated["optimum"] == "held_by_constraint"
    assert moved >= 1  # the demo's prices are off their best: some moves are cut short


def test_the_spread_is_the_library_s_over_the_catalogue(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    calibration.spread_cache.clear()
    demo.load(db.settings, seed=7)
    _fit(client, headers, FITTED)
    engine = make_engine(db.settings)
    with session_scope(make_session_factory(engine, writer=False)) as session:
        served = move_spread_for(session, "calibrated")
        assert move_spread_for(session, "cautious") is None
    engine.dispose()
    expected = _library_spread(db)
    assert served is not None and expected is not None
    assert served == pytest.approx(expected, rel=1e-9)


def test_without_a_catalogue_calibrated_falls_back_to_cautious(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    calibration.spread_cache.clear()
    demo.load(db.settings, seed=7)
    # Only two products with an active fit: too few to tell the catalogue's spread.
    sku = _fit(client, headers, FITTED[:2])[0]
    calibrated = _answer(client, headers, sku, decide_by="calibrated")
    cautious = _answer(client, headers, sku, decide_by="cautious", no_harm_check=True)
    assert calibrated["recommended"]["price"] == cautious["recommended"]["price"]
    assert "catalogue_calibration" not in calibrated["binding_constraints"]
