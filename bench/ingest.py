"""Ingest benchmark: Marginal's CSV import against the raw driver's bulk load of the same rows.

For each database it loads the same N rows twice into freshly migrated, empty schemas:
(a) the baseline, the raw driver's fastest bulk path on pre-parsed tuples (sqlite3
``executemany`` in one transaction; psycopg ``COPY``), and (b) Marginal's import, which
parses and checks the CSV text, resolves skus, detects duplicates and upserts, streaming
in chunks. It prints rows/s for both and the ratio (goal: at least 0.5x), plus the
import's peak memory, measured in a child process, to show it stays bounded.

    python bench/ingest.py --rows 1000000 --backends sqlite,postgresql
"""

from __future__ import annotations

import argparse
import csv
import datetime as dt
import json
import os
import resource
import sqlite3
import subprocess
import sys
import tempfile
import time
import uuid
from pathlib import Path

import numpy as np
import sqlalchemy as sa

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from service.core import migrate  # noqa: E402
from service.core.settings import Settings  # noqa: E402

POSTGRES_URL = os.environ.get(
    "MARGINAL_TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/test"
)
PERIODS = 100


def write_csv(path: Path, rows: int, seed: int = 1) -> None:
    rng = np.random.default_rng(seed)
    n_products = max(1, rows // PERIODS)
    start = dt.date(2023, 1, 2)
    periods = [(start + dt.timedelta(weeks=w)).isoformat() for w in range(PERIODS)]
    with path.open("w", newline="") as handle:
        out = csv.writer(handle)
        out.writerow(
            ["sku", "period", "price", "units", "unit_cost", "in_stock", "promo", "rival_price"]
        )
        written = 0
        for p in range(n_products):
            base = float(rng.uniform(3, 40))
            prices = np.round(base * np.exp(rng.normal(0, 0.1, PERIODS)), 2)
            units = rng.poisson(50, PERIODS)
            promo = rng.random(PERIODS) < 0.1
            rival = np.round(rng.normal(1, 0.05, PERIODS), 4)
            for w in range(PERIODS):
                if written == rows:
                    return
                out.writerow(
                    [
                        f"SKU-{p:06d}",
                        periods[w],
                        prices[w],
                        units[w],
                        round(base * 0.5, 2),
                        "true",
                        int(promo[w]),
                        rival[w],
                    ]
                )
                written += 1


def parsed_rows(path: Path, product_ids: dict[str, int]) -> list[tuple[object, ...]]:
    """The same rows as the raw driver would get them from an upstream parser."""
    rows: list[tuple[object, ...]] = []
    with path.open(newline="") as handle:
        reader = csv.reader(handle)
        next(reader)
        for sku, period, price, units, cost, _stock, promo, rival in reader:
            rows.append(
                (
                    product_ids[sku],
                    period,
                    float(price),
                    float(units),
                    float(cost),
                    True,
                    json.dumps({"promo": float(promo), "rival_price": float(rival)}),
                )
            )
    return rows


def fresh_settings(backend: str, tmp: Path) -> Settings:
    if backend == "sqlite":
        return Settings(database_url=f"sqlite:///{tmp / f'bench-{uuid.uuid4().hex[:6]}.db'}")
    schema = f"marginal_bench_{uuid.uuid4().hex[:8]}"
    engine = sa.create_engine(POSTGRES_URL)
    with engine.begin() as conn:
        conn.execute(sa.text(f"CREATE SCHEMA {schema}"))
    engine.dispose()
    return Settings(database_url=POSTGRES_URL, database_schema=schema)


def drop(settings: Settings) -> None:
    if settings.database_schema:
        engine = sa.create_engine(POSTGRES_URL)
        with engine.begin() as conn:
            conn.execute(sa.text(f"DROP SCHEMA {settings.database_schema} CASCADE"))
        engine.dispose()


def create_products(settings: Settings, skus: list[str]) -> dict[str, int]:
    from service.catalogue import products
    from service.core.db import make_engine, make_session_factory, session_scope

    engine = make_engine(settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        ids = products.create_bare(session, skus=skus)
    engine.dispose()
    return ids


def raw_load(settings: Settings, rows: list[tuple[object, ...]]) -> float:
    columns = "product_id, period, price, units, unit_cost, in_stock, covariates"
    started = time.perf_counter()
    if settings.is_sqlite:
        conn = sqlite3.connect(settings.database_url.split("///", 1)[1], isolation_level=None)
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=NORMAL")
        conn.execute("BEGIN")
        conn.executemany(f"INSERT INTO observations ({columns}) VALUES (?,?,?,?,?,?,?)", rows)
        conn.execute("COMMIT")
        conn.close()
    else:
        import psycopg

        url = POSTGRES_URL.replace("postgresql+psycopg://", "postgresql://")
        options = f"-csearch_path={settings.database_schema}"
        copy_sql = f"COPY observations ({columns}) FROM STDIN"
        with (
            psycopg.connect(url, options=options) as conn,
            conn.cursor() as cur,
            cur.copy(copy_sql) as cp,
        ):
            for row in rows:
                cp.write_row(row)
    return time.perf_counter() - started


CHILD = """
import json, resource, sys, time
from pathlib import Path
sys.path.insert(0, sys.argv[1])
from service.core.settings import Settings  # noqa: E402
from service.core.db import make_engine, make_session_factory, session_scope  # noqa: E402
from service.catalogue.ingest import import_csv  # noqa: E402
settings = Settings.model_validate_json(sys.argv[2])
engine = make_engine(settings)
def high_water_mb():
    # VmHWM belongs to this process image; ru_maxrss would include the parent's before exec.
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return float("nan")
before = high_water_mb()
started = time.perf_counter()
sessions = make_session_factory(engine, writer=True, bulk_load=True)
with open(sys.argv[3], "rb") as raw, session_scope(sessions) as s:
    outcome = import_csv(s, raw, create_products=False, chunk_rows=settings.import_chunk_rows)
elapsed = time.perf_counter() - started
print(json.dumps({"seconds": elapsed, "rows": outcome.rows, "inserted": outcome.inserted,
                  "rss_before_mb": before, "rss_peak_mb": high_water_mb()}))
"""


def marginal_import(settings: Settings, path: Path) -> dict[str, float]:
    result = subprocess.run(
        [sys.executable, "-c", CHILD, str(ROOT), settings.model_dump_json(), str(path)],
        check=True,
        capture_output=True,
        text=True,
    )
    return dict(json.loads(result.stdout.strip().splitlines()[-1]))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--backends", default="sqlite,postgresql")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        tmp = Path(folder)
        path = tmp / "observations.csv"
        write_csv(path, args.rows)
        size_mb = path.stat().st_size / 1e6
        print(f"{args.rows:,} rows, CSV of {size_mb:.1f} MB")
        skus = sorted({f"SKU-{p:06d}" for p in range(max(1, args.rows // PERIODS))})
        for backend in args.backends.split(","):
            base = fresh_settings(backend, tmp)
            ours = fresh_settings(backend, tmp)
            try:
                for settings in (base, ours):
                    migrate.upgrade(settings)
                rows = parsed_rows(path, create_products(base, skus))
                create_products(ours, skus)
                raw_seconds = raw_load(base, rows)
                del rows
                measured = marginal_import(ours, path)
                assert measured["inserted"] == args.rows, measured
                raw_rate = args.rows / raw_seconds
                our_rate = args.rows / measured["seconds"]
                print(
                    f"{backend:>10}: raw driver {raw_rate:>9,.0f} rows/s | Marginal import "
                    f"{our_rate:>9,.0f} rows/s | ratio {our_rate / raw_rate:.2f}x (goal >= 0.5x) | "
                    f"import peak RSS {measured['rss_peak_mb']:.0f} MB "
                    f"(at start {measured['rss_before_mb']:.0f} MB)"
                )
            finally:
                drop(base)
                drop(ours)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"bench process peak RSS {peak:.0f} MB")


if __name__ == "__main__":
    main()
