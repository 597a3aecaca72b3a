"""The refit job's records equal fits made product by product, whatever way it reads,
batches and writes them.

The job reads only the covariates its spec names (the database extracts them), fits
batches on the stacked path, makes each record's JSON while the previous batch is
written, and writes records in bulk (COPY on PostgreSQL, where reads and writes also
run beside the fitting). The reference is the single-product path: the full history read
from the stored documents, fitted alone with ``models.fit_many`` (equal to
``models.fit_demand``, which test_fit_statsmodels.py and test_fit_reference.py check
against statsmodels and the NIST certified values) and written through the ORM. The
data are the invented demo shop (models.scenario), its traps included.
"""

from __future__ import annotations

import math
import os
import signal
from typing import Any

import pytest
import sqlalchemy as sa
from sqlalchemy.orm import Session

from models import DemandFit, ModelSpec, fit_many
from service.catalogue import demo
from service.core.db import make_engine, make_session_factory, session_scope
from service.core.settings import Settings
from service.core.tables import FitRow, JobRow, ProductRow
from service.estimation import fit_store, fits, refit
from service.estimation import gates as gates_module
from service.estimation.histories import load_history
from service.estimation.history_reader import HistoryReader
from service.jobs import queue as jobs
from service.jobs.worker import JobRunner
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage
REL, ABS = 1e-9, 1e-12


def _run(settings: Settings, *, spec: dict[str, Any] | None = None) -> tuple[str, list[int]]:
    """Refit everything, unchanged histories too; the job's status and the progress it reported."""
    engine = make_engine(settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = jobs.create(session, kind="refit", scope="all", refit_unchanged=True, spec=spec).id
    runner = JobRunner(engine, settings)
    runner.claim(job_id)
    seen: list[int] = []
    status = runner.run(job_id, on_progress=lambda p: seen.append(p.done))
    engine.dispose()
    return status, seen


def _close(got: Any, want: Any, where: str = "") -> None:
    """Equal records: numbers to REL/ABS (batched and single fits differ in rounding at
    most), everything else exactly."""
    if isinstance(want, dict):
        assert isinstance(got, dict) and got.keys() == want.keys(), where
        for key in want:
            _close(got[key], want[key], f"{where}.{key}")
    elif isinstance(want, list):
        assert isinstance(got, list) and len(got) == len(want), where
        for i, (g, w) in enumerate(zip(got, want, strict=True)):
            _close(g, w, f"{where}[{i}]")
    elif isinstance(want, float) and not isinstance(want, bool):
        assert isinstance(got, int | float), where
        assert math.isclose(got, want, rel_tol=REL, abs_tol=ABS), (where, got, want)
    else:
        assert got == want, (where, got, want)


def _reference(session: Session, product: ProductRow, spec: ModelSpec) -> Any:
    cross = [s for s in spec.cross_prices if s != product.sku]
    history = load_history(session, product=product, cross_skus=cross)
    [fit] = fit_many([history], spec, families={product.sku: product.family or ""})
    return fit


def _check_records(settings: Settings, spec: dict[str, Any] | None) -> dict[str, str]:
    """Compare every stored record with the reference; the status of each product."""
    engine = make_engine(settings)
    statuses = {}
    with session_scope(make_session_factory(engine, writer=False)) as session:
        job = session.scalars(sa.select(JobRow).order_by(JobRow.id.desc())).first()
        assert job is not None
        failed = {e["sku"]: e["reason"] for e in job.errors or []}
        for product in session.scalars(sa.select(ProductRow).order_by(ProductRow.sku)):
            model_spec = ModelSpec.from_dict(
                spec if spec is not None else product.default_spec or {}
            )
            want = _reference(session, product, model_spec)
            row = session.scalar(sa.select(FitRow).where(FitRow.product_id == product.id))
            if not isinstance(want, DemandFit):
                assert row is None and product.sku in failed, product.sku
                assert failed[product.sku] == want.reason.removeprefix(f"{product.sku}: ")
                statuses[product.sku] = "failed"
                continue
            assert row is not None, product.sku
            _close(row.result, want.to_dict(), product.sku)
            assert row.spec == model_spec.to_dict()
            restored = DemandFit.from_dict(row.result)
            gates = gates_module.quality_gates(restored, None, settings)
            assert row.gates == {
                "passed": all(g.passed for g in gates),
                "checks": [g.to_dict() for g in gates],
            }
            assert row.status == ("active" if row.gates["passed"] else "rejected")
            assert (row.version, row.job_id, row.form) == (1, job.id, restored.form)
            assert row.n_obs == restored.quality.n_obs
            assert row.holdout_wape == restored.quality.holdout_wape
            assert row.own_price_estimate == restored.own_price.estimate
            assert str(row.window_start) == restored.window.first_period
            assert str(row.window_end) == restored.window.last_period
            statuses[product.sku] = row.status
    engine.dispose()
    return statuses


def test_job_records_equal_single_product_fits(db: Database) -> None:
    demo.load(db.settings, seed=7)
    settings = db.settings.model_copy(update={"job_batch_size": 6})
    status, seen = _run(settings)
    assert status == "succeeded"
    # The demo tins' specs differ in their cross prices: batches of up to 6 per spec,
    # each reported once, in order.
    assert seen[0] == 0 and seen[-1] == 40
    assert all(b - a in range(1, 7) for a, b in zip(seen, seen[1:], strict=False))
    statuses = _check_records(settings, None)
    assert len(statuses) == 40
    assert statuses["TEA-001"] == statuses["TEA-009"] == "rejected"  # the demo's traps
    assert statuses["TEA-017"] == "failed"  # too short a history
    assert list(statuses.values()).count("active") >= 33


def test_covariates_named_only_as_instruments_are_read(db: Database) -> None:
    """Two-stage least squares with a covariate as the price instrument: the job must
    read that covariate although no term of the equation uses it."""
    demo.load(db.settings, seed=7)
    spec = {"form": "log-log", "covariates": ["promo", "holiday"], "instruments": ["ad_spend"]}
    status, seen = _run(db.settings.model_copy(update={"job_batch_size": 16}), spec=spec)
    assert status == "succeeded" and seen[-1] == 40
    statuses = _check_records(db.settings, spec)
    assert "active" in statuses.values()


def test_a_failed_write_keeps_the_batches_before_it(
    db: Database, monkeypatch: pytest.MonkeyPatch
) -> None:
    demo.load(db.settings, seed=7)
    calls = []
    record = refit._record

    def failing_second_write(session: Session, **kwargs: Any) -> None:
        calls.append(len(kwargs["batch"]))
        if len(calls) == 2:
            raise RuntimeError("the disk is full")
        record(session, **kwargs)

    monkeypatch.setattr(refit, "_record", failing_second_write)
    spec = {"form": "log-log", "covariates": ["promo", "rival_price"]}
    status, seen = _run(db.settings.model_copy(update={"job_batch_size": 5}), spec=spec)
    assert status == "failed"
    assert seen == [0, 5]
    engine = make_engine(db.settings)
    with engine.connect() as conn:
        assert conn.execute(sa.text("SELECT count(*) FROM fits")).scalar_one() == 5
        job = conn.execute(sa.text("SELECT done, message FROM jobs")).one()
    engine.dispose()
    assert job.done == 5 and "the disk is full" in job.message


def test_bulk_written_records_equal_orm_written_ones(db: Database) -> None:
    demo.load(db.settings, seed=7)
    engine = make_engine(db.settings)
    factory = make_session_factory(engine, writer=True)
    with session_scope(factory) as session:
        first = fits.fit_product(session, sku="TEA-003", spec=None, settings=db.settings)
        first_id, product_id = first.id, first.product_id
    with session_scope(factory) as session:
        orm_row = session.get(FitRow, first_id)
        assert orm_row is not None
        fit = DemandFit.from_dict(orm_row.result)
        gates = gates_module.quality_gates(fit, None, db.settings)
        session.execute(sa.update(FitRow).values(status=gates_module.SUPERSEDED))
        fit_store.insert_rows(
            session,
            [fit_store.row_values(product_id=product_id, version=2, fit=fit, gates=gates)],
        )
    columns = [c.name for c in FitRow.__table__.columns if c.name not in ("id", "version")]
    with session_scope(make_session_factory(engine, writer=False)) as session:
        orm, bulk = session.scalars(sa.select(FitRow).order_by(FitRow.version)).all()
        for name in columns:
            if name not in ("status", "created_at"):
                assert getattr(bulk, name) == getattr(orm, name), name
        assert (orm.status, bulk.status) == ("superseded", "active")
        assert bulk.created_at >= orm.created_at
        texts = session.execute(
            sa.select(
                *(sa.cast(getattr(FitRow, n), sa.Text) for n in ("spec", "result", "gates"))
            ).order_by(FitRow.version)
        ).all()
    engine.dispose()
    assert texts[0] == texts[1]  # the same JSON text (SQLite) or the same jsonb


@pytest.fixture
def readers(monkeypatch: pytest.MonkeyPatch) -> list[HistoryReader]:
    """Every reader process a job starts, and how many batches each answered."""
    started: list[HistoryReader] = []
    original_init, original_answer = HistoryReader.__init__, HistoryReader.answer

    def init(self: HistoryReader, *args: Any) -> None:
        original_init(self, *args)
        self.answered = 0  # type: ignore[attr-defined]
        started.append(self)

    def answer(self: HistoryReader) -> Any:
        rows = original_answer(self)
        self.answered += 1  # type: ignore[attr-defined]
        return rows

    monkeypatch.setattr(HistoryReader, "__init__", init)
    monkeypatch.setattr(HistoryReader, "answer", answer)
    return started


def _results(settings: Settings, version: int) -> dict[int, str]:
    engine = make_engine(settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.text("SELECT product_id, result FROM fits WHERE version = :v"), {"v": version}
        ).all()
    engine.dispose()
    return dict(rows)  # type: ignore[arg-type]


def test_reader_processes_give_the_records_one_process_gives(
    db: Database, readers: list[HistoryReader]
) -> None:
    """SQLite: batches read by reader processes are fitted into the very records the
    job's own process makes when it reads them itself."""
    if db.backend != "sqlite":
        pytest.skip("reader processes serve SQLite only")
    demo.load(db.settings, seed=7)
    alone = db.settings.model_copy(update={"job_batch_size": 4, "job_read_processes": 0})
    assert _run(alone)[0] == "succeeded" and readers == []
    helped = alone.model_copy(update={"job_read_processes": 2})
    status, seen = _run(helped)
    assert status == "succeeded" and seen[-1] == 40
    assert len(readers) == 2 and all(r.answered >= 3 for r in readers)  # type: ignore[attr-defined]
    assert all(r.wait_for_exit() == 0 for r in readers)
    first, second = _results(db.settings, 1), _results(db.settings, 2)
    assert len(first) == 39 and first == second  # one tin is too short to fit


def test_a_job_reads_the_rest_itself_when_a_reader_process_dies(
    db: Database, readers: list[HistoryReader], caplog: pytest.LogCaptureFixture
) -> None:
    if db.backend != "sqlite":
        pytest.skip("reader processes serve SQLite only")
    demo.load(db.settings, seed=7)
    settings = db.settings.model_copy(update={"job_batch_size": 4})
    engine = make_engine(settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = jobs.create(session, kind="refit", scope="all", refit_unchanged=True).id
    runner = JobRunner(engine, settings)
    runner.claim(job_id)

    killed: list[int] = []

    def kill_the_readers(progress: jobs.Progress) -> None:
        if progress.done > 0 and not killed:
            assert len(readers) == 2
            for reader in readers:
                os.kill(reader.pid, signal.SIGKILL)
                killed.append(reader.wait_for_exit())

    status = runner.run(job_id, on_progress=kill_the_readers)
    engine.dispose()
    assert status == "succeeded" and killed == [-signal.SIGKILL] * 2
    assert "reads in its own process from now on" in caplog.text
    assert len(_check_records(settings, None)) == 40
