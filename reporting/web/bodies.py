"""Request bodies of the entry server: JSON parsed with the load boundary's protections.

:func:`parse_body` reads a body the way a study file is read (UTF-8, duplicate keys refused, see
:func:`reporting.documents.parse_json`), then walks the result once without recursion and refuses
what later code could not handle or write back: nesting deeper than
:data:`~reporting.documents.MAX_NESTING`, integers too long to be a measurement, non-finite numbers
and text that is not Unicode (a lone surrogate such as ``"\\ud800"`` cannot be encoded as UTF-8).
Each refusal is an :class:`InputError` located at the dotted path of the value.
"""

from __future__ import annotations

import logging
import math
from typing import Any

from reporting.documents import MAX_NESTING, parse_json
from reporting.errors import InputError

log = logging.getLogger(__name__)

MAX_INTEGER_DIGITS = 18
"""Longest integer a body may hold; no study measurement needs more than a handful of digits."""
_JSON_INT_DIGITS_LIMIT = 4300  # CPython's default limit on int <-> text conversion


def _unicode_problem(text: str) -> str | None:
    try:
        text.encode("utf-8")
    except UnicodeEncodeError as exc:
        return f"text holds a lone surrogate (\\u{ord(text[exc.start]):04x}), which is not Unicode text"
    return None


def _where(source: str, path: list[str]) -> str:
    return f"{source}: {'.'.join(path)}" if path else source


def check_value(data: Any, source: str) -> None:
    """Refuse deep nesting, huge or non-finite numbers and non-Unicode text anywhere in ``data``."""
    stack: list[tuple[Any, list[str], int]] = [(data, [], 0)]
    while stack:
        value, path, depth = stack.pop()
        if isinstance(value, dict | list):
            if depth >= MAX_NESTING:
                shown = [*path[:8], "…"] if len(path) > 8 else path
                raise InputError(
                    _where(source, shown), f"nested more than {MAX_NESTING} levels deep"
                )
            items = value.items() if isinstance(value, dict) else enumerate(value)
            for key, item in items:
                if isinstance(key, str) and (problem := _unicode_problem(key)):
                    raise InputError(_where(source, path), f"a key {problem}")
                stack.append((item, [*path, str(key)], depth + 1))
        elif isinstance(value, str):
            if problem := _unicode_problem(value):
                raise InputError(_where(source, path), problem)
        elif isinstance(value, bool):
            continue
        elif isinstance(value, int):
            if abs(value) >= 10**MAX_INTEGER_DIGITS:
                raise InputError(
                    _where(source, path),
                    f"a number with {len(str(abs(value)))} digits is too large "
                    f"(at most {MAX_INTEGER_DIGITS} digits)",
                )
        elif isinstance(value, float) and not math.isfinite(value):
            raise InputError(_where(source, path), f"{value} is not a finite number")


def parse_body(raw: bytes, source: str) -> Any:
    """The JSON value of a request body, checked by :func:`check_value`."""
    if not raw.strip():
        raise InputError(source, "the request has no body; send the study as JSON")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(source, f"the body is not UTF-8 text (byte {exc.start})") from None
    try:
        data = parse_json(text, source)
    except InputError as exc:
        if "digits" in exc.problem and str(_JSON_INT_DIGITS_LIMIT) in exc.problem:
            # Python's own wording points at an interpreter setting; say what is wrong instead
            raise InputError(
                source,
                f"a number has more than {_JSON_INT_DIGITS_LIMIT} digits "
                f"(at most {MAX_INTEGER_DIGITS} are accepted)",
            ) from None
        raise
    check_value(data, source)
    return data
