"""The ``segreport store`` command group, loaded lazily: ``segreport --help`` imports only this."""

from __future__ import annotations

import importlib
from typing import Any

import click

SHORT_HELP = "Report store: versions, signatures, amendments, audit trail."


class LazyStoreGroup(click.Group):
    """A group whose real commands are in :mod:`reporting.store.cli`, imported on first use."""

    def _real(self) -> click.Group:
        group = importlib.import_module("reporting.store.cli").store
        assert isinstance(group, click.Group)
        return group

    def list_commands(self, ctx: click.Context) -> list[str]:
        return self._real().list_commands(ctx)

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        return self._real().get_command(ctx, cmd_name)

    def format_help_text(self, ctx: click.Context, formatter: Any) -> None:
        self.help = self._real().help
        super().format_help_text(ctx, formatter)


def store_group() -> click.Group:
    return LazyStoreGroup("store", short_help=SHORT_HELP, help=SHORT_HELP)
