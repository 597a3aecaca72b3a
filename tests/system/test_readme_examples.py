"""Every curl example of the README runs as written, in order, against a fresh demo (what
`scripts/serve-demo` sets up), answers 2xx, and leaves the demo's products and histories
as they were (README: "run them from the repository's folder, in order")."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
import sqlalchemy as sa

from service.catalogue import demo
from service.core import migrate
from service.core.app import create_app
from service.core.db import make_engine
from service.core.settings import Settings
from tests.plugins.live_server import serve
from tests.plugins.storage import make_key

ROOT = Path(__file__).resolve().parents[2]
BLOCK = re.compile(r"```sh\n(.*?)```", re.DOTALL)
# Every curl of the examples fails on an answer that is not 2xx, and never hangs.
CURL = 'curl() { command curl --fail-with-body --max-time 120 "$@"; }\n'


def runnable_blocks() -> list[str]:
    """The README's shell examples that talk to a running service (`$M`), in order; the
    line that says where `$M` and `$KEY` come from is the test's to set."""
    blocks = BLOCK.findall((ROOT / "README.md").read_text())
    return [b for b in blocks if "$M" in b and "curl" in b and "mk_..." not in b]


def _demo_figures(settings: Settings) -> list[tuple[object, ...]]:
    engine = make_engine(settings)
    with engine.connect() as conn:
        products = conn.execute(
            sa.text(
                "SELECT sku, name, family, currency, unit_cost, current_price, min_price, "
                "max_price, default_spec, updated_at, history_changed_at FROM products "
                "WHERE sku LIKE 'TEA-0%' ORDER BY sku"
            )
        ).all()
        observations = conn.execute(
            sa.text(
                "SELECT p.sku, o.period, o.price, o.units, o.unit_cost, o.in_stock, "
                "o.covariates FROM observations o JOIN products p ON p.id = o.product_id "
                "WHERE p.sku LIKE 'TEA-0%' ORDER BY p.sku, o.period"
            )
        ).all()
    engine.dispose()
    return [tuple(r) for r in (*products, *observations)]


@pytest.mark.skipif(shutil.which("curl") is None, reason="the examples need curl")
def test_the_readme_examples_run_as_written(tmp_path: Path) -> None:
    blocks = runnable_blocks()
    assert len(blocks) >= 8, "the README's examples were not found"
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'marginal.db'}")
    migrate.upgrade(settings)
    demo.load(settings, seed=7)
    key = make_key(settings, "read", "write", "admin", name="demo")
    before = _demo_figures(settings)
    bin_dir = str(Path(sys.executable).parent)  # `marginal` for the command-line lines
    with serve(create_app(settings)) as base:
        env = {
            **{k: v for k, v in os.environ.items() if not k.startswith("MARGINAL_")},
            "M": base,
            "KEY": key,
            "ADMIN_KEY": key,
            "PATH": f"{bin_dir}{os.pathsep}{os.environ.get('PATH', '')}",
            "MARGINAL_DATABASE_URL": settings.database_url,
        }
        for block in blocks:
            done = subprocess.run(
                ["bash", "-euo", "pipefail", "-c", CURL + block],
                cwd=ROOT,
                env=env,
                capture_output=True,
                text=True,
                timeout=600,
            )
            assert done.returncode == 0, f"{block}\n--- said:\n{done.stdout}\n{done.stderr}"
    assert _demo_figures(settings) == before


def test_the_sample_csv_is_what_its_script_makes() -> None:
    # README: the sample is simulated from known true parameters by examples/make_history.py.
    sys.path.insert(0, str(ROOT / "examples"))
    try:
        import make_history  # type: ignore[import-not-found]
    finally:
        sys.path.remove(str(ROOT / "examples"))
    assert (ROOT / "examples" / "history.csv").read_text() == make_history.history_csv()
