"""Errors of the report store, each a located :class:`~reporting.errors.InputError`.

The command line prints them as ``Error: <location>: <problem>`` and exits 1. The location names
the store (its URL without the password), the study and version, or the user concerned.
"""

from __future__ import annotations

from reporting.errors import InputError


class StoreError(InputError):
    """A store operation was refused or could not run; nothing was written."""


class NotFound(StoreError):
    """No such study, or no such version of it."""


class AuthError(StoreError):
    """Unknown user, wrong password, locked account or a missing role."""


class ConflictError(StoreError):
    """Another process changed the study first; this operation wrote nothing."""


class IntegrityFailure(StoreError):
    """``store verify`` found a broken hash link or an altered signature."""
