"""Shared by the HTTP benchmarks: a temporary demo database, refitted, served on loopback."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from models import generate_catalogue  # noqa: E402
from service.access import auth  # noqa: E402
from service.catalogue import demo  # noqa: E402
from service.core import migrate  # noqa: E402
from service.core.db import make_engine, make_session_factory, session_scope  # noqa: E402
from service.core.settings import Settings  # noqa: E402
from service.jobs import queue as jobs  # noqa: E402
from service.jobs.worker import JobRunner  # noqa: E402


def prepare(settings: Settings, *, n_products: int = 50, seed: int = 11) -> str:
    """Migrate, load an invented catalogue, refit it; returns a key with every scope."""
    migrate.upgrade(settings)
    demo.load_catalogue(settings, generate_catalogue(seed, n_products=n_products))
    engine = make_engine(settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = jobs.create(session, kind="refit", scope="all").id
        key = auth.create_key(session, name="bench", scopes=["read", "write", "admin"]).secret
    runner = JobRunner(engine, settings)
    runner.claim(job_id)
    runner.run(job_id)
    engine.dispose()
    return key


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def serve(settings: Settings, port: int, *, workers: int = 1) -> subprocess.Popen[bytes]:
    """`marginal serve` on 127.0.0.1:port, once it answers /readyz."""
    env = dict(
        os.environ,
        MARGINAL_DATABASE_URL=settings.database_url,
        MARGINAL_WORKER_ENABLED="false",
        MARGINAL_SCHEDULER_ENABLED="false",
        MARGINAL_LOG_LEVEL="warning",
    )
    process = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "service.cli",
            "serve",
            "--host",
            "127.0.0.1",
            "--port",
            str(port),
            "--workers",
            str(workers),
        ],
        env=env,
        cwd=ROOT,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"http://127.0.0.1:{port}/readyz", timeout=1).status_code == 200:
                return process
        except httpx.HTTPError:
            pass
        time.sleep(0.2)
    process.kill()
    raise RuntimeError("the server did not become ready")
