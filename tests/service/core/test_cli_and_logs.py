"""The command line for batch runs, and structured logs that never carry secrets."""

from __future__ import annotations

import io
import json
import logging
import os
import subprocess
import sys
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from service.catalogue import demo
from service.core import logs
from tests.plugins.storage import Database

ROOT = Path(__file__).resolve().parent.parent


def _cli(db: Database, *args: str) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, MARGINAL_DATABASE_URL=db.settings.database_url)
    if db.settings.database_schema:
        env["MARGINAL_DATABASE_SCHEMA"] = db.settings.database_schema
    return subprocess.run(
        [sys.executable, "-m", "service.cli", *args],
        env=env,
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=300,
        check=False,
    )


@pytest.mark.storage
def test_refit_prints_progress_and_a_summary(db: Database) -> None:
    demo.load(db.settings, seed=7)
    one = _cli(db, "refit", "--sku", "TEA-004")
    assert one.returncode == 0, one.stderr
    assert "refit job 1: 1/1" in one.stderr  # plain progress lines when not on a terminal
    assert "activated" in one.stdout and "succeeded" in one.stdout

    everything = _cli(db, "refit", "--all")
    assert everything.returncode == 1  # a product failed (too little data)
    assert "TEA-017" in everything.stdout and "more" in everything.stdout
    listing = _cli(db, "jobs")
    assert listing.returncode == 0
    assert listing.stdout.splitlines()[1].split()[:3] == ["2", "refit", "succeeded"]


@pytest.mark.storage
def test_request_logs_are_json_with_request_id_and_no_secret(
    client: TestClient, headers: dict[str, str]
) -> None:
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(logs.JsonFormatter())
    access = logging.getLogger("marginal.access")
    access.addHandler(handler)
    access.setLevel(logging.INFO)
    try:
        response = client.get("/v1/products", headers={**headers, "X-Request-ID": "req-42"})
    finally:
        access.removeHandler(handler)
    assert response.headers["x-request-id"] == "req-42"
    line = json.loads(stream.getvalue().strip().splitlines()[-1])
    assert line["request_id"] == "req-42"
    assert line["message"] == "GET /v1/products 200"
    assert line["status"] == 200 and line["key_id"]
    secret = headers["Authorization"].split()[-1]
    assert secret not in stream.getvalue()
    assert secret.split("_", 2)[2] not in stream.getvalue()


def test_json_formatter_keeps_exceptions_on_one_line() -> None:
    record = logging.LogRecord("marginal", logging.ERROR, __file__, 1, "boom %s", ("x",), None)
    try:
        raise ValueError("inner")
    except ValueError:
        record.exc_info = sys.exc_info()
    text = logs.JsonFormatter().format(record)
    assert "\n" not in text
    entry = json.loads(text)
    assert entry["message"] == "boom x" and "ValueError: inner" in entry["error"]
