"""Load test: mixed traffic against a served Marginal on loopback, bounded in requests and time.

Reads (product lists, histories, demand models, elasticities), predictions, price
recommendations and small CSV imports, from several keep-alive clients at once. Reports
throughput, p50 and p99 latency (overall and per kind) and the error count (any answer
other than 2xx, or a failed connection).

    python bench/load.py                      # serves a temporary demo database itself
    python bench/load.py --url http://127.0.0.1:8000 --key mk_...   # an instance you run

Only loopback addresses are accepted as targets.
"""

from __future__ import annotations

import argparse
import datetime as dt
import random
import statistics
import sys
import tempfile
import threading
import time
from collections import defaultdict
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import urlparse

import httpx

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from bench.serving import free_port, prepare, serve  # noqa: E402
from service.core.settings import Settings  # noqa: E402

FUTURE = dt.date(2030, 1, 7)  # imports write weeks no fit has seen
MIX = (("read", 0.5), ("predict", 0.2), ("optimal-price", 0.2), ("import", 0.1))


@dataclass
class Tally:
    latencies: dict[str, list[float]] = field(default_factory=lambda: defaultdict(list))
    errors: dict[str, int] = field(default_factory=lambda: defaultdict(int))
    lock: threading.Lock = field(default_factory=threading.Lock)

    def add(self, kind: str, seconds: float, ok: bool) -> None:
        with self.lock:
            self.latencies[kind].append(seconds)
            if not ok:
                self.errors[kind] += 1


def _loopback(url: str) -> None:
    host = urlparse(url).hostname or ""
    if host not in ("127.0.0.1", "localhost", "::1") and not host.startswith("127."):
        raise SystemExit(f"refusing to load {host}: only loopback targets are allowed")


def _request(client: httpx.Client, kind: str, skus: list[str], rng: random.Random) -> bool:
    sku = rng.choice(skus)
    if kind == "read":
        path = rng.choice(
            [
                "/v1/products?limit=50",
                f"/v1/products/{sku}/observations?limit=104",
                f"/v1/products/{sku}/demand-model",
                f"/v1/products/{sku}/elasticities",
            ]
        )
        response = client.get(path)
    elif kind == "predict":
        response = client.post(
            f"/v1/products/{sku}/predict", json={"price": round(rng.uniform(5, 30), 2)}
        )
    elif kind == "optimal-price":
        response = client.post(
            f"/v1/products/{sku}/optimal-price",
            json={"objective": "profit", "constraints": {"max_change_pct": 10}},
        )
    else:
        first = FUTURE + dt.timedelta(weeks=rng.randrange(0, 52))
        body = "sku,period,price,units\n" + "".join(
            f"{sku},{(first + dt.timedelta(weeks=i)).isoformat()},"
            f"{rng.uniform(5, 30):.2f},{rng.randrange(0, 200)}\n"
            for i in range(10)
        )
        response = client.post("/v1/imports", content=body, headers={"Content-Type": "text/csv"})
    # A product without an active fit answers 404 by design: not a load error.
    return response.status_code < 300 or response.status_code == 404


def run_load(
    base: str, key: str, *, requests: int, seconds: float, clients: int, seed: int = 1
) -> Tally:
    _loopback(base)
    headers = {"Authorization": f"Bearer {key}"}
    with httpx.Client(base_url=base, headers=headers, timeout=30) as client:
        skus = [p["sku"] for p in client.get("/v1/products", params={"limit": 500}).json()["items"]]
    tally = Tally()
    budget = iter(range(requests))
    budget_lock = threading.Lock()
    deadline = time.monotonic() + seconds
    kinds, weights = zip(*MIX, strict=True)

    def worker(index: int) -> None:
        rng = random.Random(seed * 1000 + index)
        with httpx.Client(base_url=base, headers=headers, timeout=30) as client:
            while time.monotonic() < deadline:
                with budget_lock:
                    if next(budget, None) is None:
                        return
                kind = rng.choices(kinds, weights)[0]
                started = time.perf_counter()
                try:
                    ok = _request(client, kind, skus, rng)
                except httpx.HTTPError:
                    ok = False
                tally.add(kind, time.perf_counter() - started, ok)

    threads = [threading.Thread(target=worker, args=(i,)) for i in range(clients)]
    started = time.perf_counter()
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    tally.latencies["(elapsed)"] = [time.perf_counter() - started]
    return tally


def report(tally: Tally) -> str:
    elapsed = tally.latencies.pop("(elapsed)")[0]
    everything = sorted(v for values in tally.latencies.values() for v in values)
    lines = [
        f"{len(everything)} requests in {elapsed:.1f} s: {len(everything) / elapsed:,.0f} "
        f"req/s, errors {sum(tally.errors.values())}"
    ]
    rows = [("all", everything)] + sorted(tally.latencies.items())
    lines.append(f"{'kind':<14} {'count':>6} {'p50 ms':>8} {'p99 ms':>8} {'errors':>6}")
    for kind, values in rows:
        ordered = sorted(values)
        p50 = statistics.median(ordered) * 1000
        p99 = ordered[min(len(ordered) - 1, int(0.99 * len(ordered)))] * 1000
        errors = sum(tally.errors.values()) if kind == "all" else tally.errors.get(kind, 0)
        lines.append(f"{kind:<14} {len(values):>6} {p50:>8.1f} {p99:>8.1f} {errors:>6}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--url", help="a running instance (loopback only)")
    parser.add_argument("--key", help="its API key (read and write scopes)")
    parser.add_argument("--requests", type=int, default=3000)
    parser.add_argument("--seconds", type=float, default=120.0)
    parser.add_argument("--clients", type=int, default=8)
    parser.add_argument("--workers", type=int, default=2, help="server workers when self-served")
    args = parser.parse_args(argv)
    if args.url:
        tally = run_load(
            args.url, args.key, requests=args.requests, seconds=args.seconds, clients=args.clients
        )
        print(report(tally))
        return 0 if not tally.errors else 1
    with tempfile.TemporaryDirectory() as folder:
        settings = Settings(
            database_url=f"sqlite:///{Path(folder) / 'load.db'}",
            worker_enabled=False,
            scheduler_enabled=False,
        )
        key = prepare(settings)
        port = free_port()
        server = serve(settings, port, workers=args.workers)
        try:
            tally = run_load(
                f"http://127.0.0.1:{port}",
                key,
                requests=args.requests,
                seconds=args.seconds,
                clients=args.clients,
            )
        finally:
            server.terminate()
            server.wait(timeout=30)
    errors = sum(tally.errors.values())
    print(report(tally))
    return 0 if errors == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
