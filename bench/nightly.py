"""Nightly refit benchmark: the full refit job against an analyst's loop and a bare read.

Generates N products x 104 weekly periods (log-log demand with four drivers), loads them,
and times on each database, in the same run:

- the refit job as the service runs it (read every history, fit in batches with the
  vectorised path, write fit records and activations in bulk);
- (a) the loop an analyst would write: per product, a query into pandas and a
  statsmodels formula-API fit (timed over a sample of products, reported per product);
- (b) a bare read of all the rows with the raw driver (the faster of two: one before
  the job, one after).

It prints products per second and both ratios (goals: at least 20x faster than (a), at
most 2.5x the time of (b)).

    python bench/nightly.py --products 10000 --backends sqlite,postgresql
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
import uuid
import warnings
from pathlib import Path

import numpy as np
import sqlalchemy as sa

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from models import simulate_product  # noqa: E402
from service.catalogue import products  # noqa: E402
from service.catalogue.ingest import covariates_json  # noqa: E402
from service.catalogue.observations import observation_writer  # noqa: E402
from service.core import migrate  # noqa: E402
from service.core.db import make_engine, make_session_factory, session_scope  # noqa: E402
from service.core.settings import Settings  # noqa: E402
from service.jobs import queue as jobs  # noqa: E402
from service.jobs.worker import JobRunner  # noqa: E402

POSTGRES_URL = os.environ.get(
    "MARGINAL_TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/test"
)
SPEC = {
    "form": "log-log",
    "covariates": ["rival_price", "promo", "ad_spend", "holiday"],
    "log_covariates": ["rival_price", "ad_spend"],
}
FORMULA = "np.log(units) ~ np.log(price) + np.log(rival_price) + promo + np.log(ad_spend) + holiday"


def settings_for(backend: str, folder: Path) -> Settings:
    common = {"worker_enabled": False, "scheduler_enabled": False}
    if backend == "sqlite":
        return Settings(database_url=f"sqlite:///{folder / 'nightly.db'}", **common)
    schema = f"marginal_nightly_{uuid.uuid4().hex[:8]}"
    engine = sa.create_engine(POSTGRES_URL)
    with engine.begin() as conn:
        conn.execute(sa.text(f"CREATE SCHEMA {schema}"))
    engine.dispose()
    return Settings(database_url=POSTGRES_URL, database_schema=schema, **common)


def load(settings: Settings, n_products: int) -> int:
    engine = make_engine(settings)
    rows = 0
    with session_scope(make_session_factory(engine, writer=True, bulk_load=True)) as session:
        writer = observation_writer(session)
        for start in range(0, n_products, 1000):
            batch = [
                simulate_product(seed, elasticity=-1.2 - (seed % 20) / 10, sku=f"SKU-{seed:06d}")
                for seed in range(start, min(start + 1000, n_products))
            ]
            ids = products.create_bare(session, skus=[p.sku for p in batch])
            chunk = []
            for product in batch:
                h = product.history
                covs = [
                    dict(zip(h.covariates, values, strict=True))
                    for values in zip(*h.covariates.values(), strict=True)
                ]
                chunk += [
                    (
                        ids[product.sku],
                        str(h.periods[i]),
                        float(h.price[i]),
                        float(h.units[i]),
                        float(h.unit_cost[i]),
                        True,
                        covariates_json(covs[i]),
                    )
                    for i in range(h.n_periods)
                ]
            writer.write(chunk)
            rows += len(chunk)
        session.execute(sa.update(products.ProductRow).values(default_spec=SPEC))
    engine.dispose()
    return rows


def refit_job(settings: Settings) -> tuple[float, dict[str, int]]:
    engine = make_engine(settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = jobs.create(session, kind="refit", scope="all", refit_unchanged=True).id
    runner = JobRunner(engine, settings)
    runner.claim(job_id)
    started = time.perf_counter()
    status = runner.run(job_id)
    elapsed = time.perf_counter() - started
    with session_scope(make_session_factory(engine, writer=False)) as session:
        counts = dict(jobs.get_or_raise(session, job_id=job_id).counts or {})
    engine.dispose()
    assert status == "succeeded", status
    return elapsed, counts


def bare_read(settings: Settings) -> float:
    engine = make_engine(settings)
    started = time.perf_counter()
    with engine.connect() as conn:
        raw = conn.connection.driver_connection
        cursor = raw.cursor()
        cursor.execute(
            "SELECT product_id, period, price, units, unit_cost, in_stock, "
            "covariates FROM observations"
        )
        n = len(cursor.fetchall())
        cursor.close()
    elapsed = time.perf_counter() - started
    engine.dispose()
    assert n > 0
    return elapsed


def analyst_loop(settings: Settings, sample: int) -> float:
    """Seconds per product of the per-product pandas + formula loop."""
    import pandas as pd
    import statsmodels.formula.api as smf

    engine = make_engine(settings)
    with engine.connect() as conn:
        ids = [r[0] for r in conn.execute(sa.text("SELECT id FROM products ORDER BY id"))]
    ids = ids[:sample]
    started = time.perf_counter()
    with engine.connect() as conn, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for product_id in ids:
            frame = pd.read_sql(
                sa.text(
                    "SELECT period, price, units, covariates FROM observations "
                    "WHERE product_id = :p ORDER BY period"
                ),
                conn,
                params={"p": product_id},
            )
            covs = pd.json_normalize(
                frame.pop("covariates").map(
                    lambda v: v if isinstance(v, dict) else __import__("json").loads(v)
                )
            )
            frame = pd.concat([frame, covs], axis=1)
            fit = smf.ols(FORMULA, data=frame).fit()
            _ = (fit.params, fit.bse, fit.pvalues, fit.rsquared)
    elapsed = time.perf_counter() - started
    engine.dispose()
    return elapsed / len(ids)


def drop(settings: Settings) -> None:
    if settings.database_schema:
        engine = sa.create_engine(POSTGRES_URL)
        with engine.begin() as conn:
            conn.execute(sa.text(f"DROP SCHEMA {settings.database_schema} CASCADE"))
        engine.dispose()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--products", type=int, default=10_000)
    parser.add_argument(
        "--baseline-sample",
        type=int,
        default=500,
        help="products timed in the analyst's loop (rate scales linearly)",
    )
    parser.add_argument("--backends", default="sqlite,postgresql")
    args = parser.parse_args()
    np.seterr(all="ignore")
    with tempfile.TemporaryDirectory() as folder:
        for backend in args.backends.split(","):
            settings = settings_for(backend, Path(folder))
            try:
                migrate.upgrade(settings)
                started = time.perf_counter()
                rows = load(settings, args.products)
                print(
                    f"{backend}: loaded {args.products:,} products, {rows:,} rows "
                    f"in {time.perf_counter() - started:.1f} s"
                )
                # The faster of two bare reads, one before the job and one after (this
                # machine's speed drifts; the better baseline is the harder goal).
                read_seconds = bare_read(settings)
                job_seconds, counts = refit_job(settings)
                read_seconds = min(read_seconds, bare_read(settings))
                per_product = analyst_loop(settings, args.baseline_sample)
                loop_seconds = per_product * args.products
                print(
                    f"{backend:>10}: refit job {job_seconds:6.2f} s "
                    f"({args.products / job_seconds:,.0f} products/s; {counts}) | "
                    f"analyst loop {1 / per_product:,.0f} products/s "
                    f"(timed on {args.baseline_sample}) -> job is "
                    f"{loop_seconds / job_seconds:.1f}x faster (goal >= 20x) | "
                    f"bare read {read_seconds:.2f} s -> job takes "
                    f"{job_seconds / read_seconds:.2f}x the read (goal <= 2.5x)"
                )
            finally:
                drop(settings)


if __name__ == "__main__":
    main()
