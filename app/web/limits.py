"""Limits on what a request may send, and HEAD answered wherever GET is, as two small ASGI middlewares.

Request bodies: an upload (``POST /api/corpora``) may send at most the upload limit
(``LEXIGROWTH_MAX_UPLOAD_MB``) plus ``MULTIPART_ALLOWANCE`` for the form's own fields and boundaries; any
other request at most ``OTHER_BODY_BYTES``. A request whose ``Content-Length`` declares more is refused
with 413 before a byte of its body is read; a body that is streamed (chunked, or longer than it declared)
is cut off with 413 as soon as the bytes received pass the limit, so the multipart parser never spools more
than the limit to disk (RFC 9110 section 15.5.14, 413 Content Too Large).

HEAD: FastAPI routes only answer the methods they name, so HEAD would be 405 everywhere. A HEAD request is
passed on as a GET and only the headers of the answer are sent (RFC 9110 section 9.3.2: HEAD is GET without
the content).
"""

from __future__ import annotations

import json

from starlette.datastructures import Headers
from starlette.exceptions import HTTPException
from starlette.types import ASGIApp, Message, Receive, Scope, Send

UPLOAD_PATHS = frozenset({"/api/corpora"})
MULTIPART_ALLOWANCE = 1 << 20  # form fields, part headers and boundaries around the uploaded bytes
OTHER_BODY_BYTES = (
    1 << 20
)  # sign-in, comparisons, estimates: a few hundred bytes in practice (common practice)
METHODS_WITHOUT_BODY = frozenset({"GET", "HEAD", "OPTIONS"})


class BodyTooLargeError(HTTPException):
    """413 with a sentence saying which limit was passed (raised while the body is being read)."""

    def __init__(self, detail: str) -> None:
        super().__init__(status_code=413, detail=detail)


def _declared_length(scope: Scope) -> int | None:
    value = Headers(scope=scope).get("content-length")
    try:
        return int(value) if value is not None else None
    except ValueError:
        return None


class BodyLimitMiddleware:
    """Refuses request bodies over their limit: by the declared length at once, by the received length as
    soon as it passes the limit."""

    def __init__(self, app: ASGIApp, upload_mb: int) -> None:
        self.app = app
        self.upload_mb = upload_mb
        self.upload_bytes = upload_mb * (1 << 20) + MULTIPART_ALLOWANCE

    def limit(self, scope: Scope) -> tuple[int, str]:
        """The byte limit of a request and the sentence that explains a refusal."""
        if scope["method"] == "POST" and scope["path"] in UPLOAD_PATHS:
            return self.upload_bytes, (
                f"the upload is larger than the limit of {self.upload_mb} MB (LEXIGROWTH_MAX_UPLOAD_MB)"
            )
        return OTHER_BODY_BYTES, f"the request body is larger than {OTHER_BODY_BYTES // 1024} KB"

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] in METHODS_WITHOUT_BODY:
            await self.app(scope, receive, send)
            return
        limit, detail = self.limit(scope)
        declared = _declared_length(scope)
        if declared is not None and declared > limit:
            await _refuse(send, detail)  # the body is never read; the server closes the connection
            return
        received = 0

        async def counted_receive() -> Message:
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > limit:
                    raise BodyTooLargeError(detail)
            return message

        await self.app(scope, counted_receive, send)


async def _refuse(send: Send, detail: str) -> None:
    body = json.dumps({"detail": detail}).encode()
    await send(
        {
            "type": "http.response.start",
            "status": 413,
            "headers": [
                (b"content-type", b"application/json"),
                (b"content-length", str(len(body)).encode()),
                (b"connection", b"close"),
            ],
        }
    )
    await send({"type": "http.response.body", "body": body})


class HeadMiddleware:
    """HEAD is answered as GET would be, without the content (Content-Length stays that of the GET)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] != "HEAD":
            await self.app(scope, receive, send)
            return

        async def headers_only(message: Message) -> None:
            if message["type"] == "http.response.body":
                message = {
                    "type": "http.response.body",
                    "body": b"",
                    "more_body": message.get("more_body", False),
                }
            await send(message)

        await self.app(dict(scope, method="GET"), receive, headers_only)
