"""What the browser tests share: Debian's chromium driven by Playwright, and an app served by
uvicorn on a free loopback port in a background thread (nothing leaves 127.0.0.1)."""

from __future__ import annotations

import socket
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest
import uvicorn

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]

needs_chromium = pytest.mark.skipif(
    not CHROMIUM.exists(), reason="Debian chromium is not installed at /usr/bin/chromium"
)
"""CI installs chromium (.ci/run); only a machine without it skips."""


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port: int = sock.getsockname()[1]
        return port


@contextmanager
def serving(app: Any, what: str = "the server") -> Iterator[str]:
    """``app`` under uvicorn on a free loopback port until the block ends; yields its base URL."""
    config = uvicorn.Config(app, host="127.0.0.1", port=free_port(), log_level="warning")
    running = uvicorn.Server(config)
    thread = threading.Thread(target=running.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 10
    while not running.started:
        if time.monotonic() > deadline or not thread.is_alive():
            pytest.fail(f"{what} did not start")
        time.sleep(0.02)
    try:
        yield f"http://127.0.0.1:{config.port}"
    finally:
        running.should_exit = True
        thread.join(10)


@contextmanager
def chromium() -> Iterator[Any]:
    """A headless Chromium browser (Playwright), closed when the block ends."""
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            yield browser
        finally:
            browser.close()
