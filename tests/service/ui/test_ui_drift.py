"""The analyst view's catalogue marks a product whose outcomes drift."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from service.catalogue import demo
from service.core.db import make_engine, make_session_factory, session_scope
from service.ui import pages
from tests.plugins.outcome_cases import SKU, fit_and_recommend, send_outcomes
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage


def _badges(db: Database) -> dict[str, list[str]]:
    engine = make_engine(db.settings)
    try:
        with session_scope(make_session_factory(engine, writer=False)) as session:
            table = pages.catalogue(session, family="oolong", page_size=None)
            return {row.product.sku: [b.code for b in row.badges] for row in table.rows}
    finally:
        engine.dispose()


@pytest.mark.parametrize(("fall", "shown"), [(None, False), (20, True)])
def test_the_catalogue_shows_drift_only_when_outcomes_drift(
    db: Database, client: TestClient, headers: dict[str, str], fall: int | None, shown: bool
) -> None:
    demo.load(db.settings, seed=7)
    fit_and_recommend(client, headers)
    send_outcomes(client, headers, 40, fall_after=fall, seed=2)
    badges = _badges(db)
    assert ("drift" in badges[SKU]) is shown
    assert not any("drift" in codes for sku, codes in badges.items() if sku != SKU)
