"""The analyst view: a fitted and priced demo shop, SVG inspection, and a real browser.

Helpers: ``prepare_shop`` and the SVG readers (``parse``, ``element``, ``gids``,
``markers``, ``line_markers``, ``assert_clean_svg``, ``texts``). Fixtures: ``browser``
(Debian's Chromium through Playwright, per module) and ``screenshots`` (the folder browser
tests leave their screenshots in).
"""

from __future__ import annotations

import os
import re
import xml.etree.ElementTree as ET
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import pytest

from service.catalogue import demo, products
from service.core.db import make_engine, make_session_factory, session_scope
from service.core.settings import Settings
from service.jobs import queue as job_store
from service.jobs.worker import JobRunner

if TYPE_CHECKING:
    from playwright.sync_api import Browser

SVG_NS = "{http://www.w3.org/2000/svg}"
NO_HISTORY = "TEA-900"  # a product created without any sales history
REPRICE = {"objective": "profit", "constraints": {"max_change_pct": 10}, "uncertainty_draws": 60}
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-dev-shm-usage",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]


def prepare_shop(settings: Settings, *, skus: Sequence[str] | None = None) -> None:
    """The demo catalogue plus a product without history, refitted and repriced.

    ``skus`` limits the jobs to some products (the others stay unfitted), to save time.
    """
    demo.load(settings, seed=7)
    engine = make_engine(settings)
    try:
        with session_scope(make_session_factory(engine, writer=True)) as session:
            products.put(
                session,
                sku=NO_HISTORY,
                fields={
                    "name": "Empty sample tin",
                    "family": "green",
                    "currency": "EUR",
                    "unit_cost": 2.0,
                    "current_price": 5.0,
                },
            )
        scope: object = {"skus": list(skus)} if skus else "all"
        runner = JobRunner(engine, settings)
        for kind, request in (("refit", None), ("reprice", REPRICE)):
            with session_scope(make_session_factory(engine, writer=True)) as session:
                job_id = job_store.create(session, kind=kind, scope=scope, request=request).id
            runner.claim(job_id)
            assert runner.run(job_id) == job_store.SUCCEEDED
    finally:
        engine.dispose()


def parse(svg: bytes) -> ET.Element:
    return ET.fromstring(svg)


def element(root: ET.Element, gid: str) -> ET.Element | None:
    return next((e for e in root.iter() if e.attrib.get("id") == gid), None)


def gids(root: ET.Element) -> set[str]:
    return {e.attrib["id"] for e in root.iter() if "id" in e.attrib}


def markers(group: ET.Element) -> int:
    """Points drawn in a series group: one <use> or inline <path> each, outside <defs>."""
    count = 0
    for child in group:
        if child.tag == f"{SVG_NS}defs":
            continue
        if child.tag in (f"{SVG_NS}use", f"{SVG_NS}path") and child is not group:
            count += 1
        count += markers(child) if child.tag == f"{SVG_NS}g" else 0
    return count


def line_markers(group: ET.Element) -> int:
    """Markers along a line: matplotlib draws the line as one path and each marker as <use>."""
    return sum(1 for e in group.iter(f"{SVG_NS}use"))


_COORDINATES = ("d", "x", "y", "x1", "x2", "y1", "y2", "points", "transform", "width", "height")


def assert_clean_svg(svg: bytes) -> ET.Element:
    """Well-formed, titled, described, and no NaN or infinite coordinate anywhere."""
    root = parse(svg)
    assert root.tag == f"{SVG_NS}svg"
    assert root.attrib.get("role") == "img"
    title, desc = root.find(f"{SVG_NS}title"), root.find(f"{SVG_NS}desc")
    assert title is not None and title.text, "every chart has a title"
    assert desc is not None and desc.text, "every chart has a text summary"
    for node in root.iter():
        for name in _COORDINATES:
            value = node.attrib.get(name)
            if value is not None:
                assert not re.search(r"nan|inf", value, re.IGNORECASE), (node.tag, name, value)
    return root


def texts(root: ET.Element) -> str:
    """Every text drawn in the chart, joined (labels are text, not glyph outlines)."""
    return " ".join("".join(t.itertext()) for t in root.iter(f"{SVG_NS}text"))


def screenshot_dir() -> Path:
    """Where browser tests leave their screenshots (CI prints this path)."""
    folder = Path(os.environ.get("MARGINAL_SCREENSHOT_DIR", "screenshots"))
    folder.mkdir(parents=True, exist_ok=True)
    return folder.resolve()


@pytest.fixture
def screenshots() -> Path:
    """The folder browser tests leave their screenshots in."""
    return screenshot_dir()


@pytest.fixture(scope="module")
def browser() -> Iterator[Browser]:
    """Debian's Chromium driven by Playwright (never a downloaded browser)."""
    if not Path(CHROMIUM).exists():
        if os.environ.get("CI"):
            pytest.fail(f"{CHROMIUM} is missing; .ci/run installs it")
        pytest.skip(f"{CHROMIUM} is not installed (apt-get install chromium)")
    from playwright.sync_api import sync_playwright

    with sync_playwright() as playwright:
        chromium = playwright.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        yield chromium
        chromium.close()
