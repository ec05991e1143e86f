"""Reading YAML and JSON documents safely: the parsing half of every load boundary.

Study files, lab settings and territory maps all come through here, so each gets the same
protection: only a regular file is opened (a named pipe, a device such as ``/dev/zero`` or a link to
one is refused before anything is read), its size is checked before reading and no more than the
limit is ever read (:func:`read_bytes_limited`, also used for curve CSVs and records); then text checks (empty, binary, not UTF-8), no YAML aliases (an alias bomb
cannot expand), no duplicate keys, a nesting limit (deep nesting would exhaust the parser's stack),
and every parser failure — including values such as ``2026-02-30`` that YAML accepts but cannot
build — reported as an :class:`~reporting.errors.InputError` with the file and, where known, the line.
"""

from __future__ import annotations

import errno
import json
import os
import stat
from importlib import resources
from pathlib import Path
from typing import Any, BinaryIO

import yaml

from reporting.errors import InputError

MAX_DOCUMENT_BYTES = 1_000_000
MAX_NESTING = 64
"""Deepest nesting of mappings and lists accepted; real study files use fewer than ten levels."""

# libyaml's C loader when PyYAML was built with it (about 3x faster), else the pure-Python one.
_SafeLoader: type[yaml.SafeLoader] = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
_OPENING = (
    yaml.BlockMappingStartToken,
    yaml.BlockSequenceStartToken,
    yaml.FlowMappingStartToken,
    yaml.FlowSequenceStartToken,
)
_CLOSING = (yaml.BlockEndToken, yaml.FlowMappingEndToken, yaml.FlowSequenceEndToken)
# What building a value can raise besides YAMLError: bad dates (ValueError), unknown booleans
# (KeyError), digit limits on huge integers (ValueError), deep structures (RecursionError).
_BUILD_ERRORS = (ValueError, KeyError, TypeError, OverflowError, RecursionError)


def _not_regular(mode: int) -> str | None:
    """What a non-regular file is, in words; ``None`` for a regular file."""
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISFIFO(mode):
        return "a named pipe (FIFO)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def _open_regular(
    path: Path, what: str, where: str | None = None, *, follow_links: bool = True
) -> tuple[int, int]:
    """An open read-only descriptor of ``path`` and its size, refusing anything but a regular file.

    The type is checked with ``stat`` before opening (opening a device or a pipe can block or have
    effects) and again on the open descriptor, so a file swapped in between is refused too. With
    ``follow_links=False`` a symbolic link is refused as well (the entry server reads only files
    that are really in its folder). Problems are located at ``where`` (default: the path).
    """
    where = str(path) if where is None else where
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | os.O_CLOEXEC
    try:
        if follow_links:
            info = os.stat(path)  # follows symbolic links: a link to /dev/zero is a device
        else:
            info = os.lstat(path)
            if stat.S_ISLNK(info.st_mode):
                raise InputError(where, f"cannot read {what}: it is a symbolic link")
            flags |= getattr(os, "O_NOFOLLOW", 0)
        if stat.S_ISDIR(info.st_mode):
            raise InputError(where, f"is a folder, not a {what}")
        kind = _not_regular(info.st_mode)
        if kind is None:
            fd = os.open(path, flags)
            try:
                info = os.fstat(fd)
            except OSError:
                os.close(fd)
                raise
            kind = _not_regular(info.st_mode)
            if kind is not None:
                os.close(fd)
    except FileNotFoundError:
        raise InputError(where, f"cannot read {what}: no such file") from None
    except IsADirectoryError:
        raise InputError(where, f"is a folder, not a {what}") from None
    except OSError as exc:
        if exc.errno == errno.ELOOP:  # the path became a link after lstat
            raise InputError(where, f"cannot read {what}: it is a symbolic link") from None
        raise InputError(where, f"cannot read {what}: {exc.strerror or exc}") from None
    if kind is not None:
        raise InputError(where, f"is {kind}, not a regular file; a {what} must be a regular file")
    return fd, info.st_size


def _read_up_to(fd: int, limit: int) -> bytes:
    """Up to ``limit`` bytes from ``fd`` (fewer only at the end of the file)."""
    chunks: list[bytes] = []
    while limit > 0 and (chunk := os.read(fd, min(limit, 1 << 20))):
        chunks.append(chunk)
        limit -= len(chunk)
    return b"".join(chunks)


def read_bytes_limited(
    path: Path,
    *,
    what: str = "file",
    max_bytes: int,
    where: str | None = None,
    follow_links: bool = True,
) -> bytes:
    """The bytes of the regular file ``path``, refused when larger than ``max_bytes``.

    The size is checked before reading and at most ``max_bytes + 1`` bytes are ever read (a file
    growing while it is read is refused too), so a huge or sparse file costs neither time nor
    memory. Every failure is an :class:`InputError` located at ``where`` (default: the path);
    ``follow_links=False`` refuses a symbolic link.
    """
    where = str(path) if where is None else where
    fd, size = _open_regular(path, what, where, follow_links=follow_links)
    try:
        if size > max_bytes:
            raise InputError(where, f"file is {size:,} bytes; a {what} is at most {max_bytes:,}")
        # Read what stat announced plus one byte: more means the file grew, so read on to the limit.
        raw = _read_up_to(fd, size + 1)
        if len(raw) > size:
            raw += _read_up_to(fd, max_bytes + 1 - len(raw))
    except OSError as exc:
        raise InputError(where, f"cannot read {what}: {exc.strerror or exc}") from None
    finally:
        os.close(fd)
    if len(raw) > max_bytes:
        raise InputError(
            where, f"file is over {max_bytes:,} bytes; a {what} is at most {max_bytes:,}"
        )
    return raw


def open_regular(path: Path, *, what: str = "file") -> BinaryIO:
    """``path`` opened for binary reading; anything but a regular file is an :class:`InputError`.

    For readers that stream (line by line) and bound each read themselves.
    """
    fd, _size = _open_regular(path, what)
    return os.fdopen(fd, "rb")


def read_head(
    path: Path,
    limit: int,
    *,
    what: str = "file",
    where: str | None = None,
    follow_links: bool = True,
) -> tuple[bytes, int]:
    """At most the first ``limit`` bytes of the regular file ``path`` (for listings and peeks),
    and the file's size in bytes.

    Refuses what :func:`read_bytes_limited` refuses except size: a large file gives its head.
    """
    where = str(path) if where is None else where
    fd, size = _open_regular(path, what, where, follow_links=follow_links)
    try:
        return _read_up_to(fd, limit), size
    except OSError as exc:
        raise InputError(where, f"cannot read {what}: {exc.strerror or exc}") from None
    finally:
        os.close(fd)


def decode_text(raw: bytes, where: str) -> str:
    """The UTF-8 text of a whole document's bytes; empty, binary or non-UTF-8 text is refused."""
    if not raw.strip():
        raise InputError(where, "file is empty")
    if b"\x00" in raw:
        raise InputError(where, "binary file, not YAML or JSON text")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(where, f"not UTF-8 text (byte {exc.start})") from None


def read_text(path: Path, *, what: str = "file", max_bytes: int = MAX_DOCUMENT_BYTES) -> str:
    """The UTF-8 text of ``path``, or an :class:`InputError` saying why it cannot be read."""
    raw = read_bytes_limited(path, what=what, max_bytes=max_bytes)
    return decode_text(raw, str(path))


class OverlongInteger(str):
    """The digits of a JSON integer beyond Python's digit limit, kept as text.

    Validation reports it at its field; callers that must refuse any such number (the entry
    server's request bodies) recognise it by this type.
    """


def _json_int(text: str) -> int | str:
    # An integer beyond Python's digit limit stays text: validation reports it at its field.
    try:
        return int(text)
    except ValueError:
        return OverlongInteger(text)


def parse_json(text: str, where: str) -> Any:
    """Parse JSON text, refusing duplicate keys."""

    def no_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for key, value in pairs:
            if key in out:
                raise InputError(where, f"key {key!r} appears twice in one object")
            out[key] = value
        return out

    try:
        return json.loads(text, object_pairs_hook=no_duplicates, parse_int=_json_int)
    except json.JSONDecodeError as exc:
        raise InputError(
            f"{where}: line {exc.lineno}, column {exc.colno}", f"invalid JSON: {exc.msg}"
        ) from None
    except RecursionError:
        raise InputError(where, "invalid JSON: nested too deeply") from None
    except ValueError as exc:
        raise InputError(where, f"invalid JSON: {exc}") from None


class _StrictLoader(_SafeLoader):  # type: ignore[valid-type, misc]
    """Safe YAML with duplicate keys refused (aliases and deep nesting are refused before loading)."""


def _mapping(loader: yaml.SafeLoader, node: yaml.MappingNode) -> dict[Any, Any]:
    loader.flatten_mapping(node)
    out: dict[Any, Any] = {}
    for key_node, value_node in node.value:
        key = loader.construct_object(key_node, deep=True)
        try:
            hash(key)
        except TypeError:
            raise yaml.constructor.ConstructorError(
                None, None, "a mapping key must be a plain value", key_node.start_mark
            ) from None
        if key in out:
            raise yaml.constructor.ConstructorError(
                None, None, f"key {key!r} appears twice in one mapping", key_node.start_mark
            )
        out[key] = loader.construct_object(value_node, deep=True)
    return out


_StrictLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _mapping)


class _LenientLoader(_StrictLoader):
    """:class:`_StrictLoader`, except that a value YAML recognises but cannot build stays text.

    ``2026-02-30``, an integer of 5000 digits or ``!!bool maybe`` stays the text it was written
    as, so validation reports it at its field beside every other problem instead of one parser
    error hiding the rest. Used only when the strict load fails (a wrapper per value costs time).
    """


def _as_text_when_unbuildable(tag: str) -> None:
    build = _StrictLoader.yaml_constructors[tag]

    def lenient(loader: yaml.SafeLoader, node: yaml.ScalarNode) -> Any:
        try:
            return build(loader, node)
        except _BUILD_ERRORS:
            return str(node.value)

    _LenientLoader.add_constructor(tag, lenient)


for _tag in ("timestamp", "int", "float", "bool"):
    _as_text_when_unbuildable(f"tag:yaml.org,2002:{_tag}")


def _check_events(text: str) -> None:
    # Parser events give the true nesting (a flow pair like [k: v] or an indentless "- k:" ladder
    # opens two levels with one token), so depth is counted from events, not tokens.
    depth = 0
    for event in yaml.parse(text, Loader=_SafeLoader):
        if isinstance(event, yaml.AliasEvent):
            raise yaml.composer.ComposerError(
                None,
                None,
                "anchors and aliases are not allowed",
                event.start_mark,  # type: ignore[arg-type]
            )
        if isinstance(event, yaml.MappingStartEvent | yaml.SequenceStartEvent):
            depth += 1
            if depth > MAX_NESTING:
                raise yaml.composer.ComposerError(
                    None,
                    None,
                    f"nested more than {MAX_NESTING} levels deep",
                    event.start_mark,  # type: ignore[arg-type]
                )
        elif isinstance(event, yaml.MappingEndEvent | yaml.SequenceEndEvent):
            depth -= 1


def _needs_event_check(text: str) -> bool:
    """Whether ``text`` could hold an alias or nest beyond :data:`MAX_NESTING` (cheap, conservative).

    An alias needs ``*``. Every new level needs a flow bracket, a ``-`` or ``?`` indicator or a
    deeper indentation, and one indicator can open at most two levels (a sequence and
    the mapping of its first entry), so twice their count plus the indentation bounds the depth.
    A byte-order mark inside the text makes libyaml skip it at a line start, so such text is
    always checked.
    """
    if "*" in text or "\ufeff" in text:
        return True
    indent = max((len(line) - len(line.lstrip(" ")) for line in text.splitlines()), default=0)
    bound = 1 + indent + 2 * sum(text.count(c) for c in "[{-?")
    return bound > MAX_NESTING


def parse_yaml(text: str, where: str) -> Any:
    """Parse YAML text safely: no aliases, no duplicate keys, bounded nesting."""
    try:
        if _needs_event_check(text):
            _check_events(text)
        try:
            return yaml.load(text, Loader=_StrictLoader)
        except _BUILD_ERRORS:
            return yaml.load(text, Loader=_LenientLoader)  # the value is reported at its field
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        at = f"{where}: line {mark.line + 1}, column {mark.column + 1}" if mark else where
        raise InputError(at, f"invalid YAML: {exc.problem or exc.context}") from None
    except yaml.YAMLError as exc:
        raise InputError(where, f"invalid YAML: {exc}") from None
    except _BUILD_ERRORS as exc:
        raise InputError(where, f"invalid YAML value: {exc}") from None


def bundled_yaml(package: str, name: str) -> Any:
    """A YAML file shipped inside ``package`` (reference data), parsed with the fast loader.

    The package's own data needs none of the protections user files get.
    """
    text = resources.files(package).joinpath(name).read_text(encoding="utf-8")
    return yaml.load(text, Loader=_SafeLoader)


def read_yaml(path: Path, *, what: str) -> Any:
    """Read and parse a YAML file (lab settings, territory maps) with the same protections."""
    return parse_yaml(read_text(path, what=what), str(path))


def check_suffix(path: Path, suffixes: tuple[str, ...] = (".yaml", ".yml", ".json")) -> Path:
    """``path`` itself when its suffix is one of ``suffixes``, else an :class:`InputError`."""
    if path.suffix.lower() not in suffixes:
        raise InputError(
            str(path), f"unknown file type {path.suffix or '(none)'!r}; use {', '.join(suffixes)}"
        )
    return path


def parse_document(text: str, path: Path) -> Any:
    """Parse the text of ``path`` as JSON (``.json``) or YAML (anything else)."""
    where = str(path)
    return parse_json(text, where) if path.suffix.lower() == ".json" else parse_yaml(text, where)


def read_document(
    path: Path, *, what: str = "study file", suffixes: tuple[str, ...] = (".yaml", ".yml", ".json")
) -> Any:
    """Read and parse a YAML or JSON file, chosen by its suffix."""
    return parse_document(read_text(check_suffix(path, suffixes), what=what), path)


def key_lines(text: str) -> dict[tuple[str, ...], int]:
    """The line (1-based) of every key and list item in YAML or JSON ``text``, by its path.

    A path is the keys and list indexes from the top, as text (``("stages", "peak",
    "wall_motion")``). Used to locate validation problems, so it runs only when a file has some;
    text it cannot read gives an empty mapping (the problems are then shown without lines).
    """
    lines: dict[tuple[str, ...], int] = {}

    def walk(node: yaml.Node, path: tuple[str, ...]) -> None:
        if isinstance(node, yaml.MappingNode):
            for key, value in node.value:
                if isinstance(key, yaml.ScalarNode):
                    inner = (*path, str(key.value))
                    lines.setdefault(inner, key.start_mark.line + 1)
                    walk(value, inner)
        elif isinstance(node, yaml.SequenceNode):
            for index, item in enumerate(node.value):
                inner = (*path, str(index))
                lines.setdefault(inner, item.start_mark.line + 1)
                walk(item, inner)

    try:
        if _needs_event_check(text):
            _check_events(text)  # no aliases, bounded nesting: composing cannot blow up
        root = yaml.compose(text, Loader=_SafeLoader)
    except (yaml.YAMLError, RecursionError, ValueError):
        return {}
    if root is not None:
        walk(root, ())
    return lines


def peek_yaml_text(text: str, keys: tuple[str, ...]) -> str | None:
    """The text value at ``keys`` (e.g. ``("study", "id")``) read from parser events alone.

    Much cheaper than loading the document: it stops as soon as the value is found. Returns ``None``
    when the value is missing, is not plain text (a number, a list…), or the text is not YAML this
    module would accept; loading the whole document then reports the problem.
    """
    resolver = yaml.resolver.Resolver()
    # One entry per open container: [is_mapping, waiting_for_a_key, current_key].
    levels: list[list[Any]] = []

    def value_done() -> None:
        if levels and levels[-1][0]:
            levels[-1][1] = True

    try:
        for event in yaml.parse(text, Loader=_SafeLoader):
            if isinstance(event, yaml.AliasEvent):
                return None
            if isinstance(event, yaml.MappingStartEvent | yaml.SequenceStartEvent):
                if len(levels) >= MAX_NESTING:
                    return None
                if levels and levels[-1][0] and levels[-1][1]:
                    return None  # a list or mapping used as a key: never valid, loading says so
                levels.append([isinstance(event, yaml.MappingStartEvent), True, None])
            elif isinstance(event, yaml.MappingEndEvent | yaml.SequenceEndEvent):
                levels.pop()
                value_done()
            elif isinstance(event, yaml.ScalarEvent) and levels:
                level = levels[-1]
                if level[0] and level[1]:
                    level[1], level[2] = False, event.value
                    continue
                if all(lv[0] for lv in levels) and tuple(lv[2] for lv in levels) == keys:
                    tag = resolver.resolve(yaml.ScalarNode, event.value, event.implicit)  # type: ignore[no-untyped-call]
                    return event.value if tag == "tag:yaml.org,2002:str" else None
                value_done()
    except yaml.YAMLError:
        return None
    return None
