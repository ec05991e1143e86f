"""Running the entry server: bind 127.0.0.1 first, so a busy port is a plain error, then uvicorn.

:func:`serve` builds the app (an uncreatable studies folder is refused there), binds the port itself
(a port in use becomes an :class:`~reporting.errors.InputError`, which the command line prints as
``Error:`` with exit 1, instead of uvicorn's own log line and exit), and hands the bound socket
to uvicorn.
"""

from __future__ import annotations

import errno
import logging
import socket
from collections.abc import Callable
from pathlib import Path

from reporting.errors import InputError
from reporting.settings import Settings
from reporting.web.app import DEFAULT_PORT, HOST, create_app

log = logging.getLogger(__name__)


def bind(port: int) -> socket.socket:
    """A listening socket on 127.0.0.1:``port``; a port in use is an :class:`InputError`."""
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        sock.bind((HOST, port))
        sock.listen(128)
    except OSError as exc:
        sock.close()
        why = (
            "is already in use"
            if exc.errno == errno.EADDRINUSE
            else f"cannot be used: {exc.strerror}"
        )
        raise InputError(
            f"--port {port}", f"{HOST}:{port} {why}; stop the other server or choose another --port"
        ) from None
    return sock


def serve(
    studies_dir: Path,
    port: int = DEFAULT_PORT,
    *,
    drafts_dir: Path | None = None,
    reports_dir: Path | None = None,
    settings: Settings | None = None,
    phrases_path: Path | None = None,
    log_level: str = "info",
    on_ready: Callable[[str], None] | None = None,
) -> None:
    """Run the entry server on http://127.0.0.1:``port`` until interrupted (loopback only).

    The folder and the port are checked before anything runs: an uncreatable studies folder or a
    port in use raise :class:`ReportingError` (the command line prints ``Error:`` and exits 1).
    ``on_ready`` gets the page's address once the port is bound. ``phrases_path`` is the lab's
    phrase library (YAML, checked before anything runs), else the built-in starter set.
    """
    import uvicorn

    from reporting.phrases import load_library

    library = load_library(phrases_path) if phrases_path is not None else None
    app = create_app(
        studies_dir,
        drafts_dir=drafts_dir,
        reports_dir=reports_dir,
        settings=settings,
        phrases=library,
        phrases_source=phrases_path.name if phrases_path is not None else "built-in",
    )
    sock = bind(port)
    log.info("serving %s on http://%s:%d/", studies_dir, HOST, port)
    if on_ready is not None:
        on_ready(f"http://{HOST}:{port}/")
    config = uvicorn.Config(app, host=HOST, port=port, log_level=log_level, server_header=False)
    try:
        uvicorn.Server(config).run(sockets=[sock])
    finally:
        sock.close()
