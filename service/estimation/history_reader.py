"""A process of its own that reads a refit job's rows from SQLite, beside the fitting.

SQLite's driver takes the interpreter lock back for every row it hands over, so a
thread reading beside the fitting slows both down, and in one process a job on SQLite
reads, fits and writes in turn. This process reads the next batch's rows (with
`service.estimation.history_rows`, exactly as the job's own process would) while the job fits and
writes the last one, on a second core. It imports only the standard library and numpy,
so it starts in a fraction of a second.

Requests and answers are pickled on the child's standard input and output and come
back in the order asked; the job keeps at most a request or two outstanding, so
neither side can fill a pipe the other is not reading. The child ends when its input
closes (the job is over, or its process died).

    python -m service.estimation.history_reader DATABASE_PATH BUSY_TIMEOUT_MS
"""

from __future__ import annotations

import os
import pickle
import signal
import sqlite3
import subprocess
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import IO, Any

from service.estimation.history_rows import RowsRead, read_rows


class ReaderFailed(RuntimeError):
    """The reader process could not answer (it died, or its read raised)."""


class HistoryReader:
    """The job's end of a reader process."""

    def __init__(self, database: str, busy_timeout_ms: int) -> None:
        root = str(Path(__file__).resolve().parents[2])
        env = dict(os.environ)
        env["PYTHONPATH"] = os.pathsep.join(p for p in (root, env.get("PYTHONPATH")) if p)
        self._process = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "service.estimation.history_reader",
                database,
                str(busy_timeout_ms),
            ],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            env=env,
        )
        self._waiting = 0

    def ask(self, ids: Sequence[int], names: list[str] | None) -> None:
        """Ask for the rows of these products (answers come back in the order asked)."""
        assert self._process.stdin is not None
        try:
            pickle.dump((list(ids), names), self._process.stdin, protocol=pickle.HIGHEST_PROTOCOL)
            self._process.stdin.flush()
        except OSError as exc:
            raise ReaderFailed(f"the reader process is gone ({exc})") from None
        self._waiting += 1

    def answer(self) -> RowsRead:
        """The answer to the oldest request not yet answered."""
        assert self._process.stdout is not None and self._waiting > 0
        self._waiting -= 1
        try:
            kind, value = pickle.load(self._process.stdout)
        except (EOFError, OSError, pickle.UnpicklingError) as exc:
            code = self._process.poll()
            raise ReaderFailed(
                f"the reader process ended (exit status {code})" if code is not None else str(exc)
            ) from None
        if kind != "rows":
            raise ReaderFailed(f"the reader process could not read: {value}")
        rows: RowsRead = value
        return rows

    @property
    def pid(self) -> int:
        return self._process.pid

    def wait_for_exit(self, timeout: float = 10.0) -> int:
        """The process's exit status once it has ended."""
        return self._process.wait(timeout=timeout)

    def no_more_requests(self) -> None:
        """Close the process's input: it ends once it has answered what it was asked."""
        try:
            if self._process.stdin is not None:
                self._process.stdin.close()
        except OSError:
            pass

    def close(self) -> None:
        """End the process: it stops once its input closes; one that does not is killed."""
        self.no_more_requests()
        try:
            if self._process.stdout is not None:
                self._process.stdout.close()
        except OSError:
            pass
        try:
            self._process.wait(timeout=5)
        except subprocess.TimeoutExpired:
            self._process.kill()
            self._process.wait()


def serve(database: str, busy_timeout_ms: int, requests: IO[bytes], answers: IO[bytes]) -> None:
    """Answer requests until the input closes: each is read in a transaction of its own."""
    conn = sqlite3.connect(database, timeout=busy_timeout_ms / 1000, isolation_level=None)

    def fetch(sql: str, params: Sequence[Any]) -> Sequence[Any]:
        return conn.execute(sql, params).fetchall()

    while True:
        try:
            ids, names = pickle.load(requests)
        except EOFError:
            break
        try:
            conn.execute("BEGIN")
            try:
                answer: tuple[str, Any] = ("rows", read_rows(fetch, "sqlite", ids, names))
            finally:
                conn.execute("COMMIT")
        except Exception as exc:  # the job reads this batch itself and says why
            answer = ("error", f"{type(exc).__name__}: {exc}")
        try:
            pickle.dump(answer, answers, protocol=pickle.HIGHEST_PROTOCOL)
            answers.flush()
        except BrokenPipeError:
            break
    conn.close()


if __name__ == "__main__":
    # Ctrl-C on a terminal reaches the whole process group; the job decides what to do,
    # and this process ends when its input closes.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    serve(sys.argv[1], int(sys.argv[2]), sys.stdin.buffer, sys.stdout.buffer)
