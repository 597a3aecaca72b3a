"""Refit and reprice jobs on a Dask cluster: the in-process job is the reference, record
for record; a killed worker, an unreachable scheduler and SQLite."""

from __future__ import annotations

import os
import signal
import socket
import threading
import time
from typing import Any

import pytest
import sqlalchemy as sa

from models import generate_catalogue
from service.catalogue import demo
from service.cli import main
from service.core.db import make_engine, make_session_factory, session_scope
from service.core.settings import Settings
from service.estimation.refit_partition import refit_partition
from service.jobs import partitions
from service.jobs import queue as jobs
from service.jobs.worker import JobRunner
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage

# Columns of a fit record that the path it was made by may change: its row id, its job
# and the moment it was written. Every other column must be equal.
PATH_COLUMNS = ("id", "job_id", "created_at")


def needs_postgres(db: Database) -> None:
    if db.backend != "postgresql":
        pytest.skip("cluster jobs run on PostgreSQL only (SQLite is refused: tested below)")


def run_job(settings: Settings, kind: str, **options: Any) -> tuple[int, str, JobRunner]:
    engine = make_engine(settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = jobs.create(session, kind=kind, scope="all", **options).id
    runner = JobRunner(engine, settings)
    runner.claim(job_id)
    status = runner.run(job_id)
    engine.dispose()
    return job_id, status, runner


def job_row(settings: Settings, job_id: int) -> dict[str, Any]:
    engine = make_engine(settings)
    with session_scope(make_session_factory(engine, writer=False)) as session:
        row = jobs.get_or_raise(session, job_id=job_id)
        out = {
            "status": row.status,
            "done": row.done,
            "total": row.total,
            "counts": dict(row.counts or {}),
            "errors": sorted((e["sku"], e["reason"]) for e in row.errors or []),
            "message": row.message,
        }
    engine.dispose()
    return out


def fit_records(settings: Settings) -> dict[tuple[str, int], dict[str, Any]]:
    engine = make_engine(settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.text("SELECT p.sku, f.* FROM fits f JOIN products p ON p.id = f.product_id")
        ).mappings()
        out = {
            (r["sku"], r["version"]): {k: v for k, v in r.items() if k not in PATH_COLUMNS}
            for r in rows
        }
    engine.dispose()
    return out


def execute(settings: Settings, statement: str) -> list[Any]:
    engine = make_engine(settings)
    with engine.begin() as conn:
        result = conn.execute(sa.text(statement))
        rows = list(result) if result.returns_rows else []
    engine.dispose()
    return rows


def cluster_settings(db: Database, **fields: Any) -> Settings:
    return db.settings.model_copy(update={"cluster": "local:2", **fields})


def test_cluster_refit_and_reprice_equal_the_in_process_jobs(
    db: Database, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    needs_postgres(db)
    demo.load(db.settings, seed=7)
    small = {"job_batch_size": 4}
    in_process = db.settings.model_copy(update=small)
    reference_id, status, _ = run_job(in_process, "refit", refit_unchanged=True)
    assert status == "succeeded"
    reference = fit_records(in_process)
    reference_job = job_row(in_process, reference_id)
    # Prices from the in-process job's fits, then the same from the cluster.
    priced_id, status, _ = run_job(in_process, "reprice")
    assert status == "succeeded"
    priced_job = job_row(in_process, priced_id)
    priced = execute(
        in_process,
        "SELECT p.sku, r.fit_id, r.result::text FROM recommendations r "
        "JOIN products p ON p.id = r.product_id ORDER BY p.sku",
    )
    execute(in_process, "DELETE FROM recommendations")
    execute(in_process, "DELETE FROM fits")

    # 40 products in partitions of 15: three partitions over two worker processes.
    on_cluster = cluster_settings(db, job_partition_size=15, **small)
    job_id, status, runner = run_job(on_cluster, "refit", refit_unchanged=True)
    assert status == "succeeded", job_row(on_cluster, job_id)["message"]
    assert {r.number for r in runner.cluster_reports} == {0, 1, 2}
    assert len({r.worker for r in runner.cluster_reports}) >= 1
    assert fit_records(on_cluster) == reference
    assert job_row(on_cluster, job_id) == reference_job
    states = execute(
        on_cluster, f"SELECT status, done, total FROM job_partitions WHERE job_id = {job_id}"
    )
    assert [s.status for s in states] == ["succeeded"] * 3
    assert sum(s.done for s in states) == sum(s.total for s in states) == 40

    # Recommendations from the same fits, through the command line: the same prices,
    # product for product, with the progress lines, the dashboard's link and the summary.
    active = "SELECT p.sku, f.id FROM fits f JOIN products p ON p.id = f.product_id"
    fit_ids = dict(execute(on_cluster, f"{active} WHERE f.status = 'active'"))
    monkeypatch.setattr(
        "service.cli.get_settings", lambda: on_cluster.model_copy(update={"cluster": ""})
    )
    code = main(["reprice", "--all", "--cluster", "local:2"])
    shown = capsys.readouterr()
    assert code == (0 if priced_job["counts"]["failed"] == 0 else 1)
    assert "on the cluster local:2 (2 workers), partitions: 3" in shown.err
    assert "Dask dashboard: http://127.0.0.1:" in shown.err
    assert "40/40" in shown.err
    [(job_id,)] = execute(on_cluster, "SELECT max(id) FROM jobs")
    assert f"reprice job {job_id}: succeeded  (40/40 products)" in shown.out
    assert job_row(on_cluster, job_id) == priced_job
    repriced = execute(
        on_cluster,
        "SELECT p.sku, r.fit_id, r.result::text FROM recommendations r "
        "JOIN products p ON p.id = r.product_id ORDER BY p.sku",
    )
    assert [(sku, text) for sku, _, text in repriced] == [(sku, text) for sku, _, text in priced]
    assert all(fit_ids[sku] == fit_id for sku, fit_id, _ in repriced)


def test_a_worker_killed_mid_partition_loses_nothing(db: Database) -> None:
    """SIGKILL to the worker running a partition after its first committed batch: the
    scheduler runs the partition again elsewhere, which resumes after that batch."""
    needs_postgres(db)
    demo.load_catalogue(db.settings, generate_catalogue(11, n_products=100))
    settings = cluster_settings(db, job_partition_size=50, job_batch_size=2)
    killed: list[int] = []
    stop = threading.Event()

    def kill_a_worker() -> None:
        engine = make_engine(settings)
        query = sa.text(
            "SELECT worker FROM job_partitions WHERE status = 'running' AND batches_done >= 1 "
            "ORDER BY number LIMIT 1"
        )
        while not stop.is_set() and not killed:
            with engine.connect() as conn:
                worker = conn.execute(query).scalar()
            if worker:
                pid = int(worker.rpartition(":")[2])
                os.kill(pid, signal.SIGKILL)
                killed.append(pid)
            time.sleep(0.01)
        engine.dispose()

    killer = threading.Thread(target=kill_a_worker)
    killer.start()
    try:
        job_id, status, _ = run_job(settings, "refit", refit_unchanged=True)
    finally:
        stop.set()
        killer.join()
    assert killed, "no partition was seen running after its first batch"
    job = job_row(settings, job_id)
    assert status == "succeeded", job["message"]
    assert job["done"] == job["total"] == 100
    assert sum(job["counts"].values()) == 100
    attempts = execute(
        settings, f"SELECT max(attempts) FROM job_partitions WHERE job_id = {job_id}"
    )
    assert attempts[0][0] >= 2
    # Exactly one fit of this job per product fitted, and one active fit per product
    # that passed the gates: none written or activated twice.
    per_product = execute(
        settings,
        f"SELECT product_id, count(*) FROM fits WHERE job_id = {job_id} GROUP BY product_id",
    )
    assert {n for _, n in per_product} == {1}
    assert len(per_product) == job["counts"]["activated"] + job["counts"]["rejected"]
    active = execute(
        settings,
        "SELECT count(*) FROM fits WHERE status = 'active' GROUP BY product_id",
    )
    assert {n for (n,) in active} == {1}
    assert len(active) == job["counts"]["activated"]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def test_an_unreachable_scheduler_fails_the_job_with_a_message(db: Database) -> None:
    needs_postgres(db)
    demo.load(db.settings, seed=7)
    address = f"tcp://127.0.0.1:{free_port()}"
    settings = db.settings.model_copy(update={"cluster": address, "cluster_connect_seconds": 1})
    job_id, status, _ = run_job(settings, "refit")
    job = job_row(settings, job_id)
    assert status == job["status"] == "failed"
    assert f"the Dask scheduler at {address} cannot be reached" in job["message"]
    assert execute(settings, "SELECT count(*) FROM fits")[0][0] == 0


def test_sqlite_refuses_a_cluster(
    db: Database, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    if db.backend != "sqlite":
        pytest.skip("the refusal is SQLite's")
    demo.load(db.settings, seed=7)
    settings = db.settings.model_copy(update={"cluster": "local:2"})
    job_id, status, _ = run_job(settings, "refit")
    job = job_row(settings, job_id)
    assert status == "failed"
    assert "a cluster job needs PostgreSQL" in job["message"]
    assert job["done"] == 0
    monkeypatch.setattr("service.cli.get_settings", lambda: db.settings)
    assert main(["refit", "--all", "--cluster", "local:2"]) == 2
    assert "a cluster job needs PostgreSQL" in capsys.readouterr().err
    assert main(["refit", "--all", "--cluster", "elsewhere"]) == 2
    assert "expected tcp://HOST:PORT, local:N or empty" in capsys.readouterr().err
    assert execute(db.settings, "SELECT count(*) FROM jobs")[0][0] == 1  # none queued


def test_a_partition_run_again_resumes_and_a_second_run_stops(db: Database) -> None:
    """In this process, without a cluster: the partition's row decides what is left."""
    needs_postgres(db)
    demo.load(db.settings, seed=7)
    settings = db.settings.model_copy(update={"job_batch_size": 4})
    engine = make_engine(settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job = jobs.create(session, kind="refit", scope="all", refit_unchanged=True)
        ranges = partitions.plan(session, job=job, size=100)
        partitions.create(session, job_id=job.id, ranges=ranges)
        job_id = job.id
    [(first, last, count)] = ranges
    task = partitions.PartitionTask(
        job_id, 0, first, last, partitions.task_settings(settings, local=True)
    )
    report = refit_partition(task)
    assert report.products == count == 40
    assert report.peak_memory_bytes > 0
    again = refit_partition(task)  # a finished partition is not run twice
    assert again.products == 0
    assert execute(settings, f"SELECT count(*) FROM fits WHERE job_id = {job_id}")[0][0] <= 40
    with session_scope(make_session_factory(engine, writer=True)) as session:
        progress = jobs.Progress()
        with pytest.raises(partitions.PartitionTaken):
            partitions.save(session, job_id=job_id, number=0, batches_done=0, progress=progress)
    engine.dispose()


def test_two_jobs_over_the_same_products_take_turns(db: Database) -> None:
    """Two jobs' partitions over the same products at once: each product ends with one
    active fit (the products' row locks order the activations)."""
    needs_postgres(db)
    demo.load(db.settings, seed=7)
    settings = db.settings.model_copy(update={"job_batch_size": 3})
    engine = make_engine(settings)
    tasks = []
    with session_scope(make_session_factory(engine, writer=True)) as session:
        for scope in ("all", {"family": "green"}):
            job = jobs.create(session, kind="refit", scope=scope, refit_unchanged=True)
            [(first, last, _)] = partitions.plan(session, job=job, size=100)
            partitions.create(session, job_id=job.id, ranges=[(first, last, 0)])
            tasks.append(
                partitions.PartitionTask(
                    job.id, 0, first, last, partitions.task_settings(settings, local=True)
                )
            )
    engine.dispose()
    errors: list[BaseException] = []

    def run(task: partitions.PartitionTask) -> None:
        try:
            refit_partition(task)
        except BaseException as exc:  # reported below, with the other thread's
            errors.append(exc)

    threads = [threading.Thread(target=run, args=(t,)) for t in tasks]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert errors == []
    active = execute(
        settings, "SELECT count(*) FROM fits WHERE status = 'active' GROUP BY product_id"
    )
    assert {n for (n,) in active} == {1}
    both = execute(
        settings,
        "SELECT count(DISTINCT job_id) FROM fits f JOIN products p ON p.id = f.product_id "
        "WHERE p.family = 'green'",
    )
    assert both[0][0] == 2
