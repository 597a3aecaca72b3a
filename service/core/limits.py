"""Request body limits, enforced while the body streams in, before any parsing: its
size, NUL characters (refused on both databases: PostgreSQL cannot store them in text)
and how deeply a JSON body nests (:data:`service.core.bounds.MAX_JSON_DEPTH`)."""

from __future__ import annotations

import contextlib
import re

import numpy as np
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.core.bounds import MAX_JSON_DEPTH
from service.core.errors import ErrorItem, InvalidInput, PayloadTooLarge
from service.core.problems import error_response


class BodyTooLarge(Exception):
    pass


class BodyRefused(Exception):
    def __init__(self, error: InvalidInput) -> None:
        self.error = error


# A NUL in JSON text: the escape \u0000 not itself escaped (an even run of backslashes
# before it); a raw NUL byte anywhere (JSON and CSV alike).
_JSON_NUL = re.compile(rb"(?<!\\)(?:\\\\)*\\u0000", re.IGNORECASE)
_JSON_STRING = re.compile(rb'"(?:[^"\\]|\\.)*"', re.DOTALL)
_OPEN = frozenset(b"[{")
_CLOSE = frozenset(b"]}")


def nul_refusal(where: str) -> InvalidInput:
    return InvalidInput(
        "text must not contain the NUL character (U+0000)",
        errors=[ErrorItem(field=where, message="contains the NUL character (U+0000)")],
    )


def json_depth(body: bytes) -> int:
    """How deeply a JSON text nests its arrays and objects (brackets in strings aside)."""
    bare = np.frombuffer(_JSON_STRING.sub(b'""', body), dtype=np.uint8)
    steps = np.isin(bare, list(_OPEN)).astype(np.int64) - np.isin(bare, list(_CLOSE))
    return int(np.cumsum(steps).max()) if steps.size else 0


def check_body(body: bytes, *, json: bool) -> None:
    """Raise BodyRefused for a body that holds a NUL or nests too deeply."""
    if b"\x00" in body or (json and _JSON_NUL.search(body)):
        raise BodyRefused(nul_refusal("body"))
    if json and (found := json_depth(body)) > MAX_JSON_DEPTH:
        raise BodyRefused(
            InvalidInput(
                f"a JSON body nests at most {MAX_JSON_DEPTH} levels deep",
                errors=[ErrorItem(field="body", message=f"nests {found} levels deep")],
            )
        )


class BodySizeLimit:
    """Refuse bodies over the limit with 413: by Content-Length up front, else while reading.

    CSV imports (``/v1/imports``) get their own, larger limit.
    """

    def __init__(self, app: ASGIApp, *, default_limit: int, import_limit: int) -> None:
        self.app = app
        self.default_limit = default_limit
        self.import_limit = import_limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        path: str = scope.get("path", "")
        limit = self.import_limit if path.rstrip("/") == "/v1/imports" else self.default_limit
        declared = dict(scope.get("headers") or []).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > limit:
            await self._refuse(scope, receive, send, limit)
            return
        if b"%00" in scope.get("query_string", b"") or "\x00" in path:
            await error_response(nul_refusal("query"), instance=path)(scope, receive, send)
            return
        received = 0
        started = False
        exceeded = False
        refused: InvalidInput | None = None
        is_import = limit == self.import_limit and path.rstrip("/") == "/v1/imports"
        kind = dict(scope.get("headers") or []).get(b"content-type", b"").split(b";")[0]
        is_json = kind.strip().lower().endswith(b"json")
        is_form = kind.strip().lower() == b"application/x-www-form-urlencoded"
        held: list[bytes] = []

        async def limited_receive() -> Message:
            nonlocal received, exceeded, refused
            message = await receive()
            if message["type"] == "http.request":
                chunk = message.get("body", b"")
                received += len(chunk)
                if received > limit:
                    exceeded = True
                    raise BodyTooLarge
                try:
                    if is_import:
                        # CSV streams into the import: each piece is checked as it comes.
                        check_body(chunk, json=False)
                    else:
                        held.append(chunk)
                        if not message.get("more_body", False):
                            whole = b"".join(held)
                            held.clear()
                            if is_form and b"%00" in whole:
                                raise BodyRefused(nul_refusal("body"))
                            check_body(whole, json=is_json)
                except BodyRefused as exc:
                    refused = exc.error
                    raise
            return message

        async def tracking_send(message: Message) -> None:
            nonlocal started
            if exceeded or refused is not None:
                # The framework may turn the interrupted read into an answer of its own
                # (a 400 about parsing); the client is told the real reason instead.
                return
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        with contextlib.suppress(BodyTooLarge, BodyRefused):
            await self.app(scope, limited_receive, tracking_send)
        if exceeded and not started:
            await self._refuse(scope, receive, send, limit)
        elif refused is not None and not started:
            await error_response(refused, instance=path)(scope, receive, send)

    @staticmethod
    async def _refuse(scope: Scope, receive: Receive, send: Send, limit: int) -> None:
        response = error_response(
            PayloadTooLarge(f"the body exceeds the limit of {limit} bytes"),
            instance=scope.get("path"),
        )
        await response(scope, receive, send)
