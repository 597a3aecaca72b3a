"""Prometheus metrics: requests by route, jobs, fit outcomes. Exposed at /metrics."""

from __future__ import annotations

from collections.abc import Mapping

from prometheus_client import CONTENT_TYPE_LATEST, Counter, Gauge, Histogram, generate_latest

REQUESTS = Counter(
    "marginal_http_requests_total", "HTTP requests answered", ["method", "route", "status"]
)
LATENCY = Histogram(
    "marginal_http_request_duration_seconds",
    "Time to answer an HTTP request",
    ["method", "route"],
    buckets=(0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0),
)
JOBS = Counter("marginal_jobs_total", "Jobs finished", ["kind", "status"])
JOB_DURATION = Histogram(
    "marginal_job_duration_seconds",
    "Wall time of a job",
    ["kind"],
    buckets=(0.1, 0.5, 1, 2, 5, 10, 30, 60, 120, 300, 600, 1800, 3600),
)
FITS = Counter(
    "marginal_fits_total", "Fits by outcome (activated, rejected, failed, unchanged)", ["outcome"]
)
DRIFT_CHECKS = Counter(
    "marginal_drift_checks_total",
    "Outcome checks of a product against its active fit, by whether drift was flagged",
    ["flagged"],
)
PRODUCT_DRIFT = Gauge(
    "marginal_product_drift",
    "1 when the latest outcome check of a watched product flagged drift, else 0 (one series "
    "per product that has a stored recommendation and was checked)",
    ["sku"],
)
JOB_PRODUCTS = Counter(
    "marginal_job_products_total", "Products handled by jobs, by outcome", ["kind", "outcome"]
)


def record_request(method: str, route: str, status: int, seconds: float) -> None:
    REQUESTS.labels(method, route, str(status)).inc()
    LATENCY.labels(method, route).observe(seconds)


def record_job(kind: str, status: str, seconds: float, counts: Mapping[str, int] | None) -> None:
    JOBS.labels(kind, status).inc()
    JOB_DURATION.labels(kind).observe(seconds)
    for outcome, n in (counts or {}).items():
        JOB_PRODUCTS.labels(kind, outcome).inc(n)
        if kind == "refit":
            FITS.labels(outcome).inc(n)


def record_fit(outcome: str) -> None:
    FITS.labels(outcome).inc()


def record_drift_check(sku: str, flagged: bool) -> None:
    DRIFT_CHECKS.labels("true" if flagged else "false").inc()
    PRODUCT_DRIFT.labels(sku).set(1 if flagged else 0)


def exposition() -> tuple[bytes, str]:
    return generate_latest(), CONTENT_TYPE_LATEST
