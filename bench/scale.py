"""Scaling benchmark: the refit job in one process against the same job on Dask clusters.

Builds a synthetic catalogue on PostgreSQL (N products x 104 weekly periods, the
generator of ``bench/nightly.py``), then in one run times the refit job (unchanged
histories too, with no fits stored before each run):

- in this process (the reference);
- on ``local:1`` and ``local:2`` with the first partition size;
- on ``local:2`` with each further partition size (memory per worker against the
  partition size).

Each run is a process of its own, so its peak memory is its own. It prints products per
second, the ratio of each to the in-process job, the peak memory of each worker process
(the in-process job's own process for the reference), the seconds spent reading,
fitting and writing (summed over workers; reads and writes overlap the fitting), and the
machine's load average before each run, since machines are shared.

    python bench/scale.py --products 200000 --partition-sizes 20000,5000
    python bench/scale.py --schema marginal_scale_x --keep   # reuse a loaded catalogue
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
import uuid
from pathlib import Path
from typing import Any

import sqlalchemy as sa

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from bench.nightly import POSTGRES_URL, load  # noqa: E402
from service.core import migrate  # noqa: E402
from service.core.db import make_engine, make_session_factory, session_scope  # noqa: E402
from service.core.settings import Settings  # noqa: E402
from service.jobs import queue as jobs  # noqa: E402
from service.jobs.partitions import peak_memory_bytes  # noqa: E402
from service.jobs.worker import JobRunner  # noqa: E402

MB = 1024 * 1024


def settings_for(schema: str, **fields: Any) -> Settings:
    return Settings(
        database_url=POSTGRES_URL,
        database_schema=schema,
        worker_enabled=False,
        scheduler_enabled=False,
        **fields,
    )


def products_in(settings: Settings) -> int:
    engine = make_engine(settings)
    try:
        with engine.connect() as conn:
            return int(conn.execute(sa.text("SELECT count(*) FROM products")).scalar_one())
    except sa.exc.ProgrammingError:
        return 0
    finally:
        engine.dispose()


def in_process_clock() -> dict[str, float]:
    """Seconds the in-process job spends reading, fitting (and encoding the records) and
    writing, by wrapping the steps of :mod:`service.estimation.refit` (reads and writes
    run in threads of their own)."""
    from service.estimation import batch_reads, refit

    clock = {"read": 0.0, "fit": 0.0, "write": 0.0}

    def timed(name: str, fn: Any) -> Any:
        def wrapper(*args: Any, **kwargs: Any) -> Any:
            started = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                clock[name] += time.perf_counter() - started

        return wrapper

    batch_reads.read_batch = timed("read", batch_reads.read_batch)  # type: ignore[method-assign]
    refit.fit_guarded = timed("fit", refit.fit_guarded)  # type: ignore[method-assign]
    # The records' JSON is made beside the fitting, as in a partition (counted as fitting).
    refit.encode_guarded = timed("fit", refit.encode_guarded)  # type: ignore[method-assign]
    refit._write = timed("write", refit._write)  # type: ignore[method-assign]
    return clock


def one_run(schema: str, cluster: str, partition_size: int) -> dict[str, Any]:
    """One refit job (in this process), its figures as a dict."""
    settings = settings_for(schema, cluster=cluster, job_partition_size=partition_size)
    engine = make_engine(settings)
    with engine.begin() as conn:
        conn.execute(sa.text("TRUNCATE fits CASCADE"))
    clock = in_process_clock() if not cluster else None
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = jobs.create(session, kind="refit", scope="all", refit_unchanged=True).id
    runner = JobRunner(engine, settings)
    runner.claim(job_id)
    load_before = os.getloadavg()[0]
    started = time.perf_counter()
    status = runner.run(job_id)
    seconds = time.perf_counter() - started
    with session_scope(make_session_factory(engine, writer=False)) as session:
        row = jobs.get_or_raise(session, job_id=job_id)
        counts, done, message = dict(row.counts or {}), row.done, row.message
    engine.dispose()
    if clock is None:
        reports = runner.cluster_reports
        clock = {
            "read": sum(r.read_seconds for r in reports),
            "fit": sum(r.fit_seconds for r in reports),
            "write": sum(r.write_seconds for r in reports),
        }
        peaks: dict[str, int] = {}
        for report in reports:
            peaks[report.worker] = max(peaks.get(report.worker, 0), report.peak_memory_bytes)
        memory = sorted(peaks.values())
    else:
        memory = [peak_memory_bytes()]
    return {
        "cluster": cluster or "in-process",
        "partition_size": partition_size if cluster else None,
        "status": status,
        "message": message,
        "products": done,
        "counts": counts,
        "seconds": seconds,
        "clock": clock,
        "peak_memory_mb": [round(m / MB) for m in memory],
        "load_before": load_before,
        "load_after": os.getloadavg()[0],
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--products", type=int, default=200_000)
    parser.add_argument("--partition-sizes", default="20000,5000")
    parser.add_argument("--schema", help="PostgreSQL schema to use (loaded if empty)")
    parser.add_argument("--keep", action="store_true", help="keep the schema at the end")
    parser.add_argument("--one", help=argparse.SUPPRESS)  # a single run, in a child process
    args = parser.parse_args()
    sizes = [int(s) for s in args.partition_sizes.split(",")]
    if args.one is not None:
        print(json.dumps(one_run(args.schema, args.one, sizes[0])))
        return

    schema = args.schema or f"marginal_scale_{uuid.uuid4().hex[:8]}"
    settings = settings_for(schema)
    engine = sa.create_engine(POSTGRES_URL)
    with engine.begin() as conn:
        conn.execute(sa.text(f"CREATE SCHEMA IF NOT EXISTS {schema}"))
    engine.dispose()
    try:
        migrate.upgrade(settings)
        have = products_in(settings)
        if have == 0:
            started = time.perf_counter()
            rows = load(settings, args.products)
            print(
                f"loaded {args.products:,} products, {rows:,} observations in "
                f"{time.perf_counter() - started:.0f} s (schema {schema})",
                flush=True,
            )
        else:
            print(f"schema {schema}: {have:,} products already loaded", flush=True)
        runs = [("", sizes[0]), ("local:1", sizes[0])] + [("local:2", s) for s in sizes]
        results = []
        for cluster, size in runs:
            child = subprocess.run(
                [
                    sys.executable,
                    __file__,
                    "--schema",
                    schema,
                    "--one",
                    cluster,
                    "--partition-sizes",
                    str(size),
                ],
                capture_output=True,
                text=True,
                check=True,
            )
            result = json.loads(child.stdout.strip().splitlines()[-1])
            results.append(result)
            print(json.dumps(result), flush=True)
        report(results)
    finally:
        if not args.keep:
            engine = sa.create_engine(POSTGRES_URL)
            with engine.begin() as conn:
                conn.execute(sa.text(f"DROP SCHEMA IF EXISTS {schema} CASCADE"))
            engine.dispose()


def report(results: list[dict[str, Any]]) -> None:
    reference = results[0]["products"] / results[0]["seconds"]
    print(
        f"\n{'where':<11} {'partition':>9} {'seconds':>8} {'products/s':>10} {'ratio':>6} "
        f"{'peak MB per process':>20} {'read s':>7} {'fit s':>7} {'write s':>7} {'load':>9}"
    )
    for r in results:
        rate = r["products"] / r["seconds"]
        size = f"{r['partition_size']:,}" if r["partition_size"] else "-"
        memory = ", ".join(str(m) for m in r["peak_memory_mb"])
        clock = r["clock"]
        print(
            f"{r['cluster']:<11} {size:>9} {r['seconds']:8.1f} {rate:10,.0f} "
            f"{rate / reference:5.2f}x {memory:>20} {clock['read']:7.1f} {clock['fit']:7.1f} "
            f"{clock['write']:7.1f} {r['load_before']:4.1f}/{r['load_after']:.1f}"
        )
        if r["status"] != "succeeded":
            print(f"  {r['status']}: {r['message']}")


if __name__ == "__main__":
    main()
