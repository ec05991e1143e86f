"""Canonical bytes and their digests: what the store hashes is exactly what it stores.

Canonical JSON is UTF-8 with sorted keys and no insignificant white space. Times are ISO 8601
text with their UTC offset, kept as text (SQLite has no time-zone type), so a value read back is
the value that was hashed.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import socket
from functools import cache
from typing import Any

from reporting.vocabulary import Vocabulary


class Origin(Vocabulary):
    """Where an act came from, recorded in each audit event."""

    CLI = "cli"
    """The command line."""
    WEB = "web"
    """The entry page (``segreport serve``)."""


def canonical_json(value: Any) -> bytes:
    """``value`` as canonical JSON bytes (sorted keys, compact, UTF-8)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode()


def sha256_hex(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def now() -> str:
    """The current local time with its UTC offset, to the microsecond, as ISO 8601 text."""
    return dt.datetime.now().astimezone().isoformat(timespec="microseconds")


@cache
def host() -> str:
    """This computer's name, recorded in each audit event."""
    return socket.gethostname() or "unknown"
