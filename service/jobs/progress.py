"""What the CLI shows while a job runs and when it ends.

On a terminal: a tqdm progress bar. Elsewhere (cron, CI logs): a plain line every 10%.
"""

from __future__ import annotations

import shutil
import sys
from collections.abc import Sequence
from types import TracebackType
from typing import IO, Any

from tqdm import tqdm

from service.core.tables import JobRow
from service.jobs.queue import COUNT_NAMES, REPRICE_COUNT_NAMES, Progress


class JobProgressDisplay:
    def __init__(self, title: str, stream: IO[str] | None = None) -> None:
        self.title = title
        self.stream = stream or sys.stderr
        self.interactive = self.stream.isatty()
        self.bar: tqdm[Any] | None = None
        self.last_tenth = -1

    def __enter__(self) -> JobProgressDisplay:
        if self.interactive:
            # Some pseudo-terminals report a 0 x 0 screen, on which tqdm draws nothing.
            size = shutil.get_terminal_size(fallback=(100, 24))
            self.bar = tqdm(
                total=0,
                desc=self.title,
                unit="product",
                file=self.stream,
                ncols=size.columns,
                nrows=size.lines,
            )
        else:
            print(f"{self.title}: started", file=self.stream, flush=True)
        return self

    def update(self, progress: Progress) -> None:
        if self.bar is not None:
            self.bar.total = progress.total
            self.bar.n = progress.done
            self.bar.set_postfix(progress.counts, refresh=False)
            self.bar.refresh()
            return
        tenth = 10 * progress.done // progress.total if progress.total else 10
        if tenth != self.last_tenth:
            self.last_tenth = tenth
            counts = ", ".join(f"{k} {v}" for k, v in progress.counts.items())
            print(
                f"{self.title}: {progress.done}/{progress.total} ({counts})",
                file=self.stream,
                flush=True,
            )

    def note(self, text: str) -> None:
        """A line above the bar (or among the progress lines), e.g. where a job runs."""
        if self.bar is not None:
            self.bar.write(text, file=self.stream)
        else:
            print(f"{self.title}: {text}", file=self.stream, flush=True)

    def __exit__(
        self, kind: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None:
        if self.bar is not None:
            self.bar.close()


def print_summary(row: JobRow, stream: IO[str] | None = None, max_errors: int = 10) -> None:
    out = stream or sys.stdout
    counts = row.counts or {}
    names = [n for n in (*COUNT_NAMES, *REPRICE_COUNT_NAMES) if n in counts]
    width = max(len(n) for n in names) if names else 8
    print(f"\n{row.kind} job {row.id}: {row.status}  ({row.done}/{row.total} products)", file=out)
    print(f"{'outcome':<{width}}  {'products':>8}", file=out)
    print(f"{'-' * width}  {'-' * 8}", file=out)
    for name in names:
        print(f"{name:<{width}}  {counts[name]:>8}", file=out)
    errors = row.errors or []
    if errors:
        print(f"\nproblems ({len(errors)}; first {min(len(errors), max_errors)}):", file=out)
        for error in errors[:max_errors]:
            print(f"  {error['sku']}: {error['reason']}", file=out)
    if row.message:
        print(f"\n{row.message}", file=out)


def print_job_list(rows: Sequence[JobRow], stream: IO[str] | None = None) -> None:
    out = stream or sys.stdout
    print(
        f"{'id':>6}  {'kind':<8} {'status':<10} {'progress':>13}  {'created':<20} counts", file=out
    )
    for row in rows:
        counts = ", ".join(f"{k} {v}" for k, v in (row.counts or {}).items() if v)
        created = row.created_at.strftime("%Y-%m-%d %H:%M:%S")
        print(
            f"{row.id:>6}  {row.kind:<8} {row.status:<10} {row.done:>6}/{row.total:<6}  "
            f"{created:<20} {counts}",
            file=out,
        )
