"""Request body size limits, enforced while the body streams in, before any parsing."""

from __future__ import annotations

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.core.errors import PayloadTooLarge
from service.core.problems import error_response


class BodyTooLarge(Exception):
    pass


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
        received = 0
        started = False

        async def limited_receive() -> Message:
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > limit:
                    raise BodyTooLarge
            return message

        async def tracking_send(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, limited_receive, tracking_send)
        except BodyTooLarge:
            if not started:
                await self._refuse(scope, receive, send, limit)

    @staticmethod
    async def _refuse(scope: Scope, receive: Receive, send: Send, limit: int) -> None:
        response = error_response(
            PayloadTooLarge(f"the body exceeds the limit of {limit} bytes"),
            instance=scope.get("path"),
        )
        await response(scope, receive, send)
