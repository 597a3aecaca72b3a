"""Property-based fuzzing of every operation in the OpenAPI document (schemathesis).

For generated requests, valid and invalid: no 5xx, every response matches its documented
schema and status, and every error is problem+json; and the same for stateful workflows
that create resources and then use and delete them. Examples are bounded
(MARGINAL_FUZZ_EXAMPLES per operation, default 20; MARGINAL_FUZZ_STATEFUL_EXAMPLES
workflows, default 15) to keep CI short; `scripts/fuzz` runs 200 of each. Runs on SQLite:
the storage behaviour itself is covered on both databases by the other API tests.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path

import pytest
import schemathesis
import sqlalchemy as sa
from fastapi import FastAPI
from hypothesis import HealthCheck, given, settings
from hypothesis.errors import Unsatisfiable
from schemathesis import GenerationMode
from schemathesis.config import SchemathesisConfig
from schemathesis.specs.openapi.checks import positive_data_acceptance

from service.catalogue import demo
from service.core import migrate
from service.core.app import create_app
from service.core.settings import Settings
from service.jobs.worker import JobRunner
from tests.plugins.storage import make_key

EXAMPLES = int(os.environ.get("MARGINAL_FUZZ_EXAMPLES", "20"))
# Invalid data may also be refused for its size (413, before it is parsed): schemathesis's
# default list of refusals lacks it, and a generated batch can exceed the body limit.
CONFIG = SchemathesisConfig.from_dict(
    {
        "checks": {
            "negative_data_rejection": {
                "expected-statuses": [
                    "400",
                    "401",
                    "403",
                    "404",
                    "405",
                    "406",
                    "409",
                    "413",
                    "415",
                    "422",
                    "428",
                    "429",
                ]
            }
        }
    }
)


@pytest.fixture(scope="module")
def fuzz_target(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[FastAPI, str]]:
    folder: Path = tmp_path_factory.mktemp("fuzz")
    # No worker or scheduler: a queued job would change what later answers say while a
    # workflow runs, and stateful generation needs a scenario to replay alike.
    config = Settings(
        database_url=f"sqlite:///{folder / 'fuzz.db'}",
        worker_enabled=False,
        scheduler_enabled=False,
    )
    migrate.upgrade(config)
    demo.load(config, seed=7)
    key = make_key(config, "read", "write", "admin")
    app = create_app(config)
    from service.core.db import make_engine, make_session_factory, session_scope
    from service.jobs import queue as job_store

    engine = make_engine(config)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = job_store.create(session, kind="refit", scope={"family": "green"}).id
    runner = JobRunner(engine, config)
    runner.claim(job_id)
    runner.run(job_id)
    engine.dispose()
    yield app, key


def problem_json_errors(
    ctx: object, response: schemathesis.Response, case: schemathesis.Case
) -> None:
    """Every refusal is application/problem+json."""
    if response.status_code >= 400:
        value = response.headers.get("content-type", [""])
        text = value[0] if isinstance(value, list) else value
        assert text.startswith("application/problem+json"), (response.status_code, text)


def test_every_operation(fuzz_target: tuple[FastAPI, str]) -> None:
    app, key = fuzz_target
    api = schemathesis.openapi.from_asgi("/openapi.json", app, config=CONFIG)
    failures = []
    operations = 0
    cases = [
        (result.ok(), mode)
        for result in api.get_all_operations()
        for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE)
    ]
    for operation, mode in cases:
        operations += mode is GenerationMode.POSITIVE

        @given(case=operation.as_strategy(generation_mode=mode))
        @settings(
            max_examples=EXAMPLES,
            deadline=None,
            database=None,
            suppress_health_check=list(HealthCheck),
        )
        def run(case: schemathesis.Case) -> None:
            response = case.call_and_validate(
                headers={"Authorization": f"Bearer {key}"},
                additional_checks=[problem_json_errors],
                # Schema-valid input may still be refused on its meaning (an unknown
                # variable, an opaque cursor, CSV content): 422, which the issue allows.
                excluded_checks=[positive_data_acceptance],
            )
            assert response.status_code < 500

        try:
            run()
        except Unsatisfiable:
            continue  # nothing to make invalid: no parameters and no body
        except BaseException as exc:  # collect every operation's failure, report them all
            failures.append(
                f"{operation.label} ({mode.value}): {type(exc).__name__}: {str(exc)[:2000]}"
            )
    assert operations >= 25
    assert not failures, "\n\n".join(failures)


# Rows a workflow may add (SQLite), children first; rows present before the test are kept.
SCENARIO_TABLES = (
    "price_entries",
    "approval_policies",
    "recommendations",
    "fits",
    "observations",
    "products",
    "schedule_runs",
    "schedules",
    "job_partitions",
    "jobs",
    "api_keys",
)


def _last_rows(engine: sa.Engine) -> dict[str, int]:
    with engine.connect() as conn:
        return {
            table: int(
                conn.execute(sa.text(f"SELECT coalesce(max(rowid), 0) FROM {table}")).scalar_one()
            )
            for table in SCENARIO_TABLES
        }


def _remove_added_rows(engine: sa.Engine, last: dict[str, int]) -> None:
    with engine.begin() as conn:
        for table in SCENARIO_TABLES:
            conn.execute(sa.text(f"DELETE FROM {table} WHERE rowid > :last"), {"last": last[table]})


STATEFUL_EXAMPLES = int(os.environ.get("MARGINAL_FUZZ_STATEFUL_EXAMPLES", "15"))


def test_workflows_over_created_resources(fuzz_target: tuple[FastAPI, str]) -> None:
    """Stateful: sequences that create something (a product, a key, a job, a schedule) and
    then read, fill, fit, price, chart, change and delete what was created, following the
    links schemathesis infers from the document (a product's sku from PUT feeds every
    `/v1/products/{sku}/...` operation). No step answers 5xx, every answer matches the
    document and every refusal is problem+json."""
    app, key = fuzz_target
    api = schemathesis.openapi.from_asgi("/openapi.json", app, config=CONFIG)
    machine = api.as_state_machine()
    links = [name for name in dir(machine) if name.startswith("PUT_v1_products_sku___201")]
    # The links this test is for: a created product is read, filled, fitted, priced,
    # charted and deleted.
    for target in (
        "GET_v1_products_sku_",
        "POST_v1_products_sku_observations",
        "POST_v1_products_sku_fits",
        "POST_v1_products_sku_optimal_price",
        "GET_v1_products_sku_charts_kind_svg",
        "DELETE_v1_products_sku_",
    ):
        assert any(name.endswith(target) for name in links), (target, links)

    engine = app.state.engine
    last = _last_rows(engine)

    class Workflow(machine):  # type: ignore[valid-type,misc]
        def teardown(self) -> None:
            # Each scenario starts from the same catalogue, so that replaying one (as
            # Hypothesis does to shrink) meets the same answers.
            _remove_added_rows(engine, last)
            super().teardown()

        def get_call_kwargs(self, case: schemathesis.Case) -> dict[str, object]:
            return {"headers": {"Authorization": f"Bearer {key}"}}

        def validate_response(
            self,
            response: schemathesis.Response,
            case: schemathesis.Case,
            additional_checks: object = None,
            **kwargs: object,
        ) -> None:
            assert response.status_code < 500, (case.method, case.path, response.text[:500])
            case.validate_response(
                response,
                additional_checks=[problem_json_errors],
                excluded_checks=[positive_data_acceptance],
            )

    Workflow.run(
        settings=settings(
            max_examples=STATEFUL_EXAMPLES,
            stateful_step_count=8,
            deadline=None,
            database=None,
            suppress_health_check=list(HealthCheck),
        )
    )
