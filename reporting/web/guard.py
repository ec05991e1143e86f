"""Request guards of the entry server: body size, origin, content type and response headers.

The server is meant for one reader on their own machine, so it answers only loopback host names
(a page on another site cannot reach it by DNS rebinding), refuses requests that another web site's
page sends from the reader's browser (``Origin`` not this server; writes that are not JSON, which a
cross-site form could send without asking), caps every request body (413 with a plain message) and
adds headers that keep the page from loading anything that is not served here.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Mapping
from typing import Any

from starlette.types import ASGIApp, Message, Receive, Scope, Send

MAX_BODY_BYTES = 256 * 1024
LOOPBACK_HOSTS = ("127.0.0.1", "localhost", "[::1]")

# Everything the page needs comes from this server; nothing inline runs.
SECURITY_HEADERS = {
    "content-security-policy": (
        "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
        "object-src 'none'; base-uri 'none'; form-action 'self'; frame-ancestors 'none'"
    ),
    "x-content-type-options": "nosniff",
    "referrer-policy": "no-referrer",
    "x-frame-options": "DENY",
    "cache-control": "no-store",
}
WRITES = frozenset({"POST", "PUT", "PATCH", "DELETE"})
"""Methods that change something (the checks on writes apply to them)."""


async def _refuse(send: Send, status: int, detail: str) -> None:
    body = json.dumps({"detail": detail, "problems": []}).encode()
    await send(
        {
            "type": "http.response.start",
            "status": status,
            "headers": [
                (b"content-type", b"application/json"),
                (b"content-length", str(len(body)).encode()),
            ],
        }
    )
    await send({"type": "http.response.body", "body": body})


def _header(scope: Scope, name: bytes) -> str | None:
    for key, value in scope.get("headers", []):
        if key == name:
            return bytes(value).decode("latin-1")
    return None


class Guard:
    """ASGI middleware applying the checks above before the app sees a request."""

    def __init__(
        self,
        app: ASGIApp,
        *,
        max_body_bytes: int = MAX_BODY_BYTES,
        allowed_hosts: Iterable[str] = LOOPBACK_HOSTS,
        extra_headers: Mapping[str, str] | None = None,
    ) -> None:
        self.app = app
        self.headers = SECURITY_HEADERS | dict(extra_headers or {})
        self.max_body_bytes = max_body_bytes
        self.allowed_hosts = frozenset(h.lower() for h in allowed_hosts)

    def _host_ok(self, host: str | None) -> bool:
        if host is None:
            return False
        name = host.rsplit(":", 1)[0] if not host.endswith("]") else host
        return name.lower() in self.allowed_hosts

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        host = _header(scope, b"host")
        if not self._host_ok(host):
            await _refuse(
                send, 421, f"this server answers only for {', '.join(sorted(self.allowed_hosts))}"
            )
            return
        origin = _header(scope, b"origin")
        if origin is not None and origin.split("://", 1)[-1].lower() != (host or "").lower():
            await _refuse(send, 403, "requests from other web pages are refused")
            return
        method = scope["method"]
        kind = (_header(scope, b"content-type") or "").split(";", 1)[0].strip().lower()
        if method in WRITES and kind not in ("application/json", ""):
            await _refuse(
                send, 415, "send the request body as JSON (Content-Type: application/json)"
            )
            return
        too_big = (
            f"request body is larger than {self.max_body_bytes // 1024} KB; "
            "a study is far smaller — check what is being sent"
        )
        length = _header(scope, b"content-length")
        if length is not None and length.isdigit() and int(length) > self.max_body_bytes:
            await _refuse(send, 413, too_big)
            return
        # Read the body up front (it is small by now), counting, so a chunked body is capped too.
        chunks: list[bytes] = []
        size = 0
        more = True
        while more:
            message = await receive()
            if message["type"] == "http.disconnect":
                return
            chunk = message.get("body", b"")
            size += len(chunk)
            if size > self.max_body_bytes:
                await _refuse(send, 413, too_big)
                return
            chunks.append(chunk)
            more = bool(message.get("more_body", False))
        body = b"".join(chunks)
        replayed = False

        async def replay() -> Message:
            nonlocal replayed
            if not replayed:
                replayed = True
                return {"type": "http.request", "body": body, "more_body": False}
            return await receive()

        async def with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers: list[Any] = list(message.get("headers", []))
                present = {bytes(k).lower() for k, _ in headers}
                for key, value in self.headers.items():
                    if key.encode() not in present:
                        headers.append((key.encode(), value.encode()))
                message = {**message, "headers": headers}
            await send(message)

        await self.app(scope, replay, with_headers)
