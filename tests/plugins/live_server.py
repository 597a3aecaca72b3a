"""The app served over real HTTP, and a TCP proxy whose target can vanish.

Both run in threads of the test process on free loopback ports and stop within seconds.
Helpers: ``serve`` (a context manager yielding the base URL), ``TcpProxy``, ``free_port``
and ``strict_json``; fixture: ``tcp_proxy`` (a started proxy to a target, stopped after
the test).
"""

from __future__ import annotations

import contextlib
import json
import socket
import threading
import time
from collections.abc import Callable, Iterator
from typing import Any

import pytest
import uvicorn
from fastapi import FastAPI

STARTUP_SECONDS = 15.0


@contextlib.contextmanager
def serve(app: FastAPI) -> Iterator[str]:
    """Serve ``app`` with uvicorn on a free loopback port; yields the base URL."""
    listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    listener.bind(("127.0.0.1", 0))
    port = listener.getsockname()[1]
    config = uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning")
    server = uvicorn.Server(config)
    thread = threading.Thread(
        target=server.run, kwargs={"sockets": [listener]}, name="uvicorn", daemon=True
    )
    thread.start()
    deadline = time.monotonic() + STARTUP_SECONDS
    while not server.started:
        if not thread.is_alive() or time.monotonic() > deadline:
            server.should_exit = True
            listener.close()
            raise RuntimeError("the test server did not start")
        time.sleep(0.02)
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=STARTUP_SECONDS)
        listener.close()


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        port: int = probe.getsockname()[1]
        return port


class TcpProxy:
    """Forwards 127.0.0.1:``port`` to ``target``; ``stop`` makes the target unreachable.

    Stopping closes the listening socket and every live connection, as a database
    server that went away would; ``start`` listens on the same port again.
    """

    def __init__(self, target: tuple[str, int]) -> None:
        self.target = target
        self.port = free_port()
        self._listener: socket.socket | None = None
        self._sockets: set[socket.socket] = set()
        self._lock = threading.Lock()
        self._stopping = threading.Event()
        self._threads: list[threading.Thread] = []

    def start(self) -> None:
        listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        listener.bind(("127.0.0.1", self.port))
        listener.listen(64)
        listener.settimeout(0.05)
        self._listener = listener
        self._stopping.clear()
        self._spawn(self._accept_loop, listener)

    def stop(self) -> None:
        self._stopping.set()
        if self._listener is not None:
            self._listener.close()
            self._listener = None
        with self._lock:
            live, self._sockets = self._sockets, set()
        for sock in live:
            with contextlib.suppress(OSError):
                sock.shutdown(socket.SHUT_RDWR)
            sock.close()
        for thread in self._threads:
            thread.join(timeout=5)
        self._threads = [t for t in self._threads if t.is_alive()]

    def _spawn(self, target: Any, *args: Any) -> None:
        thread = threading.Thread(target=target, args=args, daemon=True)
        self._threads.append(thread)
        thread.start()

    def _accept_loop(self, listener: socket.socket) -> None:
        while not self._stopping.is_set():
            try:
                client, _ = listener.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            try:
                upstream = socket.create_connection(self.target, timeout=5)
            except OSError:
                client.close()
                continue
            upstream.settimeout(None)
            client.settimeout(None)
            with self._lock:
                if self._stopping.is_set():
                    client.close()
                    upstream.close()
                    return
                self._sockets |= {client, upstream}
            ends = [2]  # pumps still running on this connection
            self._spawn(self._pump, client, upstream, ends)
            self._spawn(self._pump, upstream, client, ends)

    def _pump(self, source: socket.socket, sink: socket.socket, ends: list[int]) -> None:
        try:
            while data := source.recv(65536):
                sink.sendall(data)
        except OSError:
            pass
        for sock in (source, sink):
            with contextlib.suppress(OSError):
                sock.shutdown(socket.SHUT_RDWR)
        with self._lock:
            ends[0] -= 1
            if ends[0] == 0 and source in self._sockets:  # the last pump closes both
                self._sockets -= {source, sink}
                source.close()
                sink.close()


def strict_json(text: str) -> Any:
    """Parse a response body, refusing NaN and Infinity (which are not JSON)."""

    def refuse(token: str) -> Any:
        raise ValueError(f"{token} in a JSON body")

    return json.loads(text, parse_constant=refuse)


@pytest.fixture
def tcp_proxy() -> Iterator[Callable[[tuple[str, int]], TcpProxy]]:
    """Start a ``TcpProxy`` to a (host, port); every proxy started is stopped afterwards."""
    started: list[TcpProxy] = []

    def start(target: tuple[str, int]) -> TcpProxy:
        proxy = TcpProxy(target)
        proxy.start()
        started.append(proxy)
        return proxy

    yield start
    for proxy in started:
        proxy.stop()
