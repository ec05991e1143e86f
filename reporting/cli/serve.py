"""``segreport serve``: the entry page over a folder, or the lab's shared page over the store (``--db``)."""

from __future__ import annotations

from pathlib import Path

import click

from reporting.cli.common import (
    user_errors,
)
from reporting.errors import ReportingError


@click.command()
@click.option(
    "--port",
    type=click.IntRange(1, 65535),
    default=8765,
    show_default=True,
    help="Port (on 127.0.0.1 unless --host names another address with --db).",
)
@click.option(
    "--studies",
    "studies_dir",
    type=click.Path(file_okay=False, path_type=Path),
    default=Path("."),
    show_default=True,
    help="Folder of study files, created when missing; drafts go to DIR/.drafts, reports to DIR/reports.",
)
@click.option(
    "--settings",
    "settings_path",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Lab settings file (YAML) overriding the default thresholds.",
)
@click.option(
    "--phrases",
    "phrases_path",
    type=click.Path(dir_okay=False, path_type=Path),
    help="The lab's phrase library (YAML) offered in the impression; default: the lab setting "
    "phrases_file, else the built-in starter set.",
)
@click.option(
    "--db",
    metavar="PATH|URL",
    help="Serve the report store instead of a folder (lab mode: users sign in): a SQLite file or "
    "postgresql+psycopg://… URL. $SEGREPORT_DB does not switch serve to lab mode.",
)
@click.option(
    "--host",
    metavar="ADDR",
    help="With --db: address to listen on [default: 127.0.0.1]; another address needs "
    "--certfile/--keyfile or --behind-proxy, and --allowed-host.",
)
@click.option(
    "--certfile",
    type=click.Path(dir_okay=False, path_type=Path),
    help="With --db: TLS certificate (PEM) to serve https.",
)
@click.option(
    "--keyfile",
    type=click.Path(dir_okay=False, path_type=Path),
    help="With --db: the certificate's private key (PEM).",
)
@click.option(
    "--behind-proxy",
    is_flag=True,
    help="With --db: a TLS proxy in front forwards the requests (needs --trusted-proxy).",
)
@click.option(
    "--trusted-proxy",
    metavar="ADDR",
    help="With --behind-proxy: the proxy's address, the only one whose forwarded headers count.",
)
@click.option(
    "--allowed-host",
    "allowed_hosts",
    multiple=True,
    metavar="NAME",
    help="With --db: a host name users open the page by (repeatable; other Host headers are refused).",
)
@click.pass_context
def serve(
    ctx: click.Context,
    port: int,
    studies_dir: Path,
    settings_path: Path | None,
    phrases_path: Path | None,
    db: str | None,
    host: str | None,
    certfile: Path | None,
    keyfile: Path | None,
    behind_proxy: bool,
    trusted_proxy: str | None,
    allowed_hosts: tuple[str, ...],
) -> None:
    """Score entry in the browser: a local page over a folder at http://127.0.0.1:PORT/, or with
    --db the lab's shared reporting page over the store, with sign-in (Ctrl+C stops)."""
    from reporting.settings import load_settings

    with user_errors():
        if db is None:
            store_only = {
                "--host": host,
                "--certfile": certfile,
                "--keyfile": keyfile,
                "--behind-proxy": behind_proxy or None,
                "--trusted-proxy": trusted_proxy,
                "--allowed-host": allowed_hosts or None,
            }
            for option, value in store_only.items():
                if value is not None:
                    raise ReportingError(
                        f"{option}: only with --db (the folder page serves this computer only)"
                    )
        elif ctx.get_parameter_source("studies_dir") != click.core.ParameterSource.DEFAULT:
            raise ReportingError("--studies: not with --db (the studies are in the store)")
        settings = load_settings(settings_path)
        if phrases_path is None and settings.phrases_file and settings_path is not None:
            phrases_path = settings_path.parent / settings.phrases_file
        if db is not None:
            from reporting.web.server import serve_store

            serve_store(
                db,
                port=port,
                host=host or "127.0.0.1",
                certfile=certfile,
                keyfile=keyfile,
                behind_proxy=behind_proxy,
                trusted_proxy=trusted_proxy,
                allowed_hosts=allowed_hosts,
                settings=settings,
                phrases_path=phrases_path,
                on_ready=lambda url: click.echo(
                    f"Lab reporting page for the store on {url} (Ctrl+C stops)", err=True
                ),
            )
            return
        from reporting.web import serve as run_server

        run_server(
            studies_dir,
            port=port,
            settings=settings,
            phrases_path=phrases_path,
            on_ready=lambda url: click.echo(
                f"Score entry for {studies_dir.resolve()} on {url} (Ctrl+C stops)", err=True
            ),
        )
