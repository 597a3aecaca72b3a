"""Price recommendation benchmark: latency of single and family recommendations, and the
HTTP throughput of `optimal-price` as a ratio of a trivial endpoint of the same server.

Loads an invented catalogue (50 tins, 10 per family) into a temporary SQLite database,
refits it, serves it with `marginal serve` on loopback, and measures in one run:

- latency (median, 90th percentile) of one product's recommendation, of a 10-product
  family's, and of both with 200 uncertainty draws;
- requests per second of `POST /v1/products/{sku}/optimal-price` and of `GET /healthz`
  under the same concurrent keep-alive load, and their ratio (goal: at least 0.3x).

    python bench/optimise.py [--requests 2000] [--clients 8]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

import httpx

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from bench.serving import free_port, prepare, serve  # noqa: E402
from service.core.settings import Settings  # noqa: E402

SINGLE = {"objective": "profit", "constraints": {"max_change_pct": 15}}


def latency(client: httpx.Client, method: str, url: str, body: object, n: int) -> str:
    times = []
    for _ in range(n):
        started = time.perf_counter()
        response = client.request(method, url, json=body)
        times.append(time.perf_counter() - started)
        assert response.status_code == 200, response.text
    times.sort()
    median = statistics.median(times) * 1000
    p90 = times[int(0.9 * (len(times) - 1))] * 1000
    return f"median {median:8.1f} ms  p90 {p90:8.1f} ms  ({n} requests)"


def throughput(
    base: str,
    headers: dict[str, str],
    method: str,
    path: str,
    body: object,
    total: int,
    clients: int,
) -> float:
    per_client = total // clients
    errors: list[int] = []

    def work() -> None:
        with httpx.Client(base_url=base, headers=headers, timeout=30) as client:
            for _ in range(per_client):
                status = client.request(method, path, json=body).status_code
                if status != 200:
                    errors.append(status)

    threads = [threading.Thread(target=work) for _ in range(clients)]
    started = time.perf_counter()
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    elapsed = time.perf_counter() - started
    assert not errors, errors[:5]
    return per_client * clients / elapsed


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--requests", type=int, default=2000)
    parser.add_argument("--clients", type=int, default=8)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        settings = Settings(
            database_url=f"sqlite:///{Path(folder) / 'bench.db'}",
            worker_enabled=False,
            scheduler_enabled=False,
        )
        key = prepare(settings)
        port = free_port()
        server = serve(settings, port)
        base = f"http://127.0.0.1:{port}"
        headers = {"Authorization": f"Bearer {key}"}
        try:
            with httpx.Client(base_url=base, headers=headers, timeout=120) as client:
                family = client.get("/v1/products", params={"family": "green"}).json()["items"]
                sku = family[1]["sku"]
                single = f"/v1/products/{sku}/optimal-price"
                joint = "/v1/families/green/optimal-prices"
                joint_body = {"objective": "profit", "constraints": {"max_change_pct": 15}}
                client.post(single, json=SINGLE)  # first call restores the fit
                print(f"family 'green' has {len(family)} products")
                print("single product              ", latency(client, "POST", single, SINGLE, 100))
                print(
                    "single, 200 draws           ",
                    latency(client, "POST", single, {**SINGLE, "uncertainty_draws": 200}, 20),
                )
                print(
                    "family of 10                ", latency(client, "POST", joint, joint_body, 10)
                )
                print(
                    "family of 10, 200 draws     ",
                    latency(client, "POST", joint, {**joint_body, "uncertainty_draws": 200}, 3),
                )
            trivial = throughput(
                base, headers, "GET", "/healthz", None, args.requests, args.clients
            )
            priced = throughput(base, headers, "POST", single, SINGLE, args.requests, args.clients)
            print(
                f"throughput: /healthz {trivial:,.0f} req/s, optimal-price {priced:,.0f} "
                f"req/s -> ratio {priced / trivial:.2f}x (goal >= 0.3x)"
            )
        finally:
            server.terminate()
            server.wait(timeout=30)


if __name__ == "__main__":
    main()
