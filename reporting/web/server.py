"""Running the entry server: bind first, so a busy port is a plain error, then uvicorn.

:func:`serve` (folder mode, 127.0.0.1 only) builds the app (an uncreatable studies folder is
refused there), binds the port itself (a port in use becomes an
:class:`~reporting.errors.InputError`, which the command line prints as ``Error:`` with exit 1,
instead of uvicorn's own log line and exit), and hands the bound socket to uvicorn.

:func:`serve_store` (lab mode, ``serve --db``) does the same over the report store, on 127.0.0.1
unless ``--host`` names another address. Another address is served only with TLS (uvicorn's own,
``--certfile/--keyfile``) or behind a TLS proxy whose address is named (``--behind-proxy
--trusted-proxy ADDR``: uvicorn then takes the client's address and scheme from the proxy's
forwarded headers, from that address only), and only for the host names given with
``--allowed-host`` (the Host header check against DNS rebinding): passwords and session cookies
never cross a network in clear (OWASP Transport Layer Security Cheat Sheet; 21 CFR 11.30 for an
open system). Each refusal says what to add.
"""

from __future__ import annotations

import errno
import ipaddress
import logging
import socket
from collections.abc import Callable, Sequence
from pathlib import Path

from reporting.errors import InputError
from reporting.settings import Settings
from reporting.web import guard
from reporting.web.app import DEFAULT_PORT, HOST, create_app

log = logging.getLogger(__name__)


def bind(port: int, host: str = HOST) -> socket.socket:
    """A listening socket on ``host``:``port``; a port in use is an :class:`InputError`."""
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    try:
        sock = socket.socket(family, socket.SOCK_STREAM)
    except OSError as exc:
        raise InputError(f"--host {host}", f"cannot be used: {exc.strerror}") from None
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        sock.bind((host, port))
        sock.listen(128)
    except OSError as exc:
        sock.close()
        why = (
            "is already in use"
            if exc.errno == errno.EADDRINUSE
            else f"cannot be used: {exc.strerror}"
        )
        raise InputError(
            f"--port {port}", f"{host}:{port} {why}; stop the other server or choose another --port"
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


def is_loopback(host: str) -> bool:
    """Whether ``host`` is this computer only (127.0.0.0/8, ::1 or ``localhost``)."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def check_exposure(
    host: str,
    *,
    certfile: Path | None,
    keyfile: Path | None,
    behind_proxy: bool,
    trusted_proxy: str | None,
    allowed_hosts: Sequence[str],
) -> None:
    """Refuse (:class:`InputError`) a lab server a network could reach without TLS or a named
    TLS proxy, or without the host names it answers for; and incomplete TLS or proxy options."""
    if (certfile is None) != (keyfile is None):
        given, missing = (
            ("--certfile", "--keyfile") if keyfile is None else ("--keyfile", "--certfile")
        )
        raise InputError(given, f"give {missing} too (uvicorn serves TLS with both)")
    if behind_proxy and not trusted_proxy:
        raise InputError(
            "--behind-proxy",
            "name the proxy's address with --trusted-proxy ADDR "
            "(forwarded headers are believed from that address only)",
        )
    if trusted_proxy and not behind_proxy:
        raise InputError("--trusted-proxy", "only with --behind-proxy")
    if trusted_proxy is not None and "*" in trusted_proxy:
        raise InputError(
            f"--trusted-proxy {trusted_proxy}",
            "name the proxy's address; trusting every address would let any client forge its "
            "address and scheme",
        )
    if is_loopback(host):
        return
    if certfile is None and not behind_proxy:
        raise InputError(
            f"--host {host}",
            "a non-loopback address needs TLS (--certfile FILE --keyfile FILE) or a TLS proxy in "
            "front (--behind-proxy --trusted-proxy ADDR); passwords and session cookies must not "
            "cross the network in clear",
        )
    if not allowed_hosts:
        raise InputError(
            f"--host {host}",
            "name the host name users open with --allowed-host NAME (repeatable); requests for "
            "any other Host header are refused",
        )


def _check_tls(certfile: Path, keyfile: Path) -> None:
    """Load the certificate and key once here, so a bad pair is an ``Error:`` line."""
    import ssl

    context = ssl.create_default_context(ssl.Purpose.CLIENT_AUTH)
    try:
        context.load_cert_chain(certfile, keyfile)
    except FileNotFoundError as exc:
        raise InputError(f"--certfile {certfile}", f"no such file: {exc.filename}") from None
    except (ssl.SSLError, OSError) as exc:
        raise InputError(
            f"--certfile {certfile}",
            f"cannot use this certificate and key (--keyfile {keyfile}): {exc}",
        ) from None


def serve_store(
    db: str | None,
    port: int = DEFAULT_PORT,
    *,
    host: str = HOST,
    certfile: Path | None = None,
    keyfile: Path | None = None,
    behind_proxy: bool = False,
    trusted_proxy: str | None = None,
    allowed_hosts: Sequence[str] = (),
    settings: Settings | None = None,
    phrases_path: Path | None = None,
    log_level: str = "info",
    on_ready: Callable[[str], None] | None = None,
) -> None:
    """Run the lab page over the store ``db`` (``--db``, else ``$SEGREPORT_DB``, else
    ``./segreport.db``) until interrupted.

    Everything is checked before anything runs (:func:`check_exposure`, the store exists and is
    current, the certificate loads, the port is free); a refusal is a :class:`ReportingError`.
    """
    import uvicorn

    from reporting.phrases import load_library
    from reporting.settings import default_settings
    from reporting.store.service import open_store
    from reporting.web.lab import create_lab_app

    check_exposure(
        host,
        certfile=certfile,
        keyfile=keyfile,
        behind_proxy=behind_proxy,
        trusted_proxy=trusted_proxy,
        allowed_hosts=allowed_hosts,
    )
    if certfile is not None and keyfile is not None:
        _check_tls(certfile, keyfile)
    library = load_library(phrases_path) if phrases_path is not None else None
    database = open_store(db, pooled=True)
    secure: bool | None = True if certfile is not None else (None if behind_proxy else False)
    app = create_lab_app(
        database,
        settings=settings or default_settings(),
        phrases=library,
        phrases_source=phrases_path.name if phrases_path is not None else "built-in",
        allowed_hosts=tuple(dict.fromkeys([*guard.LOOPBACK_HOSTS, *allowed_hosts])),
        secure_cookies=secure,
    )
    sock = bind(port, host)
    scheme = "https" if certfile is not None else "http"
    shown_host = f"[{host}]" if ":" in host else host
    log.info("serving the store %s on %s://%s:%d/", database.shown, scheme, shown_host, port)
    if on_ready is not None:
        on_ready(f"{scheme}://{shown_host}:{port}/")
    config = uvicorn.Config(
        app,
        host=host,
        port=port,
        log_level=log_level,
        server_header=False,
        ssl_certfile=str(certfile) if certfile is not None else None,
        ssl_keyfile=str(keyfile) if keyfile is not None else None,
        proxy_headers=behind_proxy,
        forwarded_allow_ips=trusted_proxy if behind_proxy else None,
        # no access log: its lines name studies and patients (worklist filters) in plain text,
        # and the store's audit trail already records who did what
        access_log=False,
    )
    try:
        uvicorn.Server(config).run(sockets=[sock])
    finally:
        sock.close()
        database.dispose()
