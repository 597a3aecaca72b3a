"""Refits keep a product's form when the hold-out scores cannot tell it from the best."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from models import ModelSpec, generate_catalogue
from models.select import score_forms_by_fold, steady_form
from service.catalogue import demo
from service.catalogue.demo import demo_spec
from service.core.db import make_engine
from service.jobs.worker import JobRunner
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage


def test_refits_keep_the_active_form_when_the_scores_cannot_tell_it_from_the_best(
    db: Database, client: TestClient, headers: dict[str, str]
) -> None:
    demo.load(db.settings, seed=7)
    product = generate_catalogue(7).product("TEA-005")
    spec = demo_spec(product)
    scored = score_forms_by_fold([product.history], ModelSpec.from_dict(spec))[0]
    assert not isinstance(scored, Exception)
    # On this product the scores cannot tell semi-log from log-log: left alone, auto picks
    # log-log; with a semi-log fit active, the refit keeps semi-log.
    assert steady_form(scored) == "log-log" and steady_form(scored, "semi-log") == "semi-log"
    semi = client.post(
        "/v1/products/TEA-005/fits", json={"spec": {**spec, "form": "semi-log"}}, headers=headers
    )
    assert semi.json()["status"] == "active", semi.json()
    job = {"kind": "refit", "scope": {"skus": ["TEA-005"]}, "refit_unchanged": True}
    assert client.post("/v1/jobs", json=job, headers=headers).status_code == 202
    engine = make_engine(db.settings)
    runner = JobRunner(engine, db.settings)
    while (job_id := runner.claim()) is not None:
        runner.run(job_id)
    engine.dispose()
    model = client.get("/v1/products/TEA-005/demand-model", headers=headers).json()
    assert (model["version"], model["spec"]["form"], model["form"]) == (2, "auto", "semi-log")
    # POST .../fits keeps it too.
    again = client.post("/v1/products/TEA-005/fits", headers=headers).json()
    assert (again["version"], again["form"]) == (3, "semi-log")
