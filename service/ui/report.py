"""`marginal report --out DIR`: the analyst pages and charts as a static folder.

The folder holds ``index.html`` (the catalogue), one ``family-*.html`` per family, one
``product-<sku>.html`` per product, the charts under ``charts/`` and the stylesheet and
script under ``static/``. Links are relative, so the folder can be published anywhere
(a nightly job copies it to an internal web server). Sorting works in the browser.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import logging
import os
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import IO

from service.core.db import make_engine, make_session_factory, session_scope
from service.core.errors import failure_reason, is_outage
from service.core.settings import Settings
from service.jobs.progress import JobProgressDisplay
from service.jobs.queue import Progress
from service.ui import chartbook, pages, records
from service.ui.links import StaticLinks
from service.ui.templating import STATIC_DIR, render

LINKS = StaticLinks()
log = logging.getLogger(__name__)


@dataclass(frozen=True)
class ReportSummary:
    out: Path
    products: int
    pages: int
    charts: int
    # Products whose page could not be made (sku: reason); the others were written.
    failed: dict[str, str] = dataclasses.field(default_factory=dict)


def _write(path: Path, content: str | bytes) -> None:
    """Write through a temporary file, so a reader never sees half a page."""
    data = content.encode() if isinstance(content, str) else content
    fd, temporary = tempfile.mkstemp(dir=path.parent, prefix=".partial-")
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
        os.chmod(temporary, 0o644)
        os.replace(temporary, path)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise


def write_report(
    settings: Settings,
    out: Path,
    *,
    family: str | None = None,
    stream: IO[str] | None = None,
) -> ReportSummary:
    """Write every page and chart of the catalogue (or of one family) into ``out``."""
    out.mkdir(parents=True, exist_ok=True)
    (out / "charts").mkdir(exist_ok=True)
    shutil.copytree(STATIC_DIR, out / "static", dirs_exist_ok=True)
    generated = dt.datetime.now(dt.UTC)
    common = {"links": LINKS, "viewer": None, "generated": generated}
    engine = make_engine(settings)
    written_pages = written_charts = 0
    failed: dict[str, str] = {}
    try:
        with session_scope(make_session_factory(engine, writer=False)) as session:
            catalogue = pages.catalogue(session, family=family, page_size=None)
            # Link only the family pages this folder holds.
            families = [family] if family else catalogue.families
            catalogue = dataclasses.replace(catalogue, families=families)
            _write(out / "index.html", render("catalogue.html", view=catalogue, **common))
            written_pages += 1
            for name in families:
                view = pages.catalogue(session, family=name, page_size=None)
                view = dataclasses.replace(view, families=families)
                _write(
                    out / LINKS.catalogue(family=name),
                    render("catalogue.html", view=view, **common),
                )
                written_pages += 1
            products = records.catalogue(session, family)
            progress = Progress(total=len(products), counts={"pages": written_pages, "charts": 0})
            with JobProgressDisplay("report", stream=stream) as display:
                display.update(progress)
                for product in products:
                    try:
                        subject = chartbook.subject(session, product)
                        drawn = chartbook.draw_all(subject)
                        page = render(
                            "product.html",
                            page=pages.product_page_for(session, subject, drawn=drawn),
                            **common,
                        )
                    except Exception as exc:  # this product alone: the folder stays whole
                        if is_outage(exc):
                            raise
                        reason = failure_reason(exc)
                        log.warning(
                            "report: the page of %s cannot be made: %s", product.sku, reason
                        )
                        failed[product.sku] = reason
                        progress.add_error(product.sku, reason)
                        drawn = {}
                        page = render(
                            "missing.html",
                            heading=f"{product.sku}: page not made",
                            detail=f"The page of this product could not be made: {reason}",
                            **common,
                        )
                    for kind, chart in drawn.items():
                        _write(out / LINKS.chart(product.sku, kind), chart.svg)
                        written_charts += 1
                    _write(out / LINKS.product(product.sku), page)
                    written_pages += 1
                    progress.done += 1
                    progress.counts = {
                        "pages": written_pages,
                        "charts": written_charts,
                        "failed": len(failed),
                    }
                    display.update(progress)
    finally:
        engine.dispose()
    return ReportSummary(
        out=out,
        products=len(products),
        pages=written_pages,
        charts=written_charts,
        failed=failed,
    )
