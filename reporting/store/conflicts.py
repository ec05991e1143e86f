"""Field-by-field differences between three versions of a study as JSON: the version an edit
started from (base), the version stored meanwhile (theirs) and the edit (mine).

Objects are compared key by key down to their leaves; a list or any other value is one leaf, and
an empty object is a leaf too (so it is not lost). A path is the keys from the top, joined with
dots in :attr:`Change.path` (``stages.peak.wall_motion.7``). A key missing on one side is
:data:`ABSENT`. :func:`changes` lists every path where theirs or mine differs from the base;
:func:`mine_on_top` applies my changes (where mine differs from the base) to theirs, which is
what "re-apply my changes on top" means. Pure functions; nothing here touches the store.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Any, Final

log = logging.getLogger(__name__)

Path = tuple[str, ...]


class _Absent:
    """A key missing on one side (different from a JSON null)."""

    _instance: _Absent | None = None

    def __new__(cls) -> _Absent:
        if cls._instance is None:
            cls._instance = super().__new__(cls)
        return cls._instance

    def __repr__(self) -> str:
        return "ABSENT"


ABSENT: Final = _Absent()


@dataclass(frozen=True)
class Change:
    """One field that differs from the base in theirs, in mine, or in both."""

    path: Path
    base: Any
    theirs: Any
    mine: Any

    @property
    def dotted(self) -> str:
        return ".".join(self.path)

    @property
    def theirs_changed(self) -> bool:
        return bool(self.theirs != self.base)

    @property
    def mine_changed(self) -> bool:
        return bool(self.mine != self.base)

    @property
    def conflict(self) -> bool:
        """Both changed the field, to different values."""
        return self.theirs_changed and self.mine_changed and self.theirs != self.mine

    def as_json(self) -> dict[str, Any]:
        """``{path, base, theirs, mine, conflict}``; a missing value is JSON null, with
        ``base_present``/``theirs_present``/``mine_present`` telling it from a stored null."""
        return {
            "path": self.dotted,
            "base": None if self.base is ABSENT else self.base,
            "theirs": None if self.theirs is ABSENT else self.theirs,
            "mine": None if self.mine is ABSENT else self.mine,
            "base_present": self.base is not ABSENT,
            "theirs_present": self.theirs is not ABSENT,
            "mine_present": self.mine is not ABSENT,
            "conflict": self.conflict,
        }


def leaves(value: Any) -> dict[Path, Any]:
    """Every leaf of ``value`` by its path (a non-object value is the leaf at the empty path)."""
    out: dict[Path, Any] = {}
    stack: list[tuple[Path, Any]] = [((), value)]
    while stack:
        path, item = stack.pop()
        if isinstance(item, dict) and item:
            stack.extend(((*path, str(k)), v) for k, v in item.items())
        else:
            out[path] = item
    return out


def changes(base: Any, theirs: Any, mine: Any) -> list[Change]:
    """Every path where theirs or mine differs from base, in path order."""
    flat = [leaves(base), leaves(theirs), leaves(mine)]
    paths = sorted(set().union(*flat), key=_order)
    found = []
    for path in paths:
        b, t, m = (_at(f, path) for f in flat)
        if t != b or m != b:
            found.append(Change(path, b, t, m))
    return found


def _at(flat: dict[Path, Any], path: Path) -> Any:
    if path in flat:
        return flat[path]
    # a path under a leaf of this side (or beyond its end) is absent here
    return ABSENT


def _order(path: Path) -> tuple[tuple[int, int | str], ...]:
    # numeric keys (segment numbers) in number order, others alphabetically
    return tuple((0, int(p)) if p.isdigit() else (1, p) for p in path)


def mine_on_top(base: Any, theirs: Any, mine: Any) -> Any:
    """Theirs with each of my changes (where mine differs from base) applied on top.

    Objects merge key by key: a key I removed is removed, a key I changed gets my value (merged
    further down when all three are objects there), every other key keeps theirs.
    """
    if mine == base:
        return theirs
    if not (isinstance(base, dict) and isinstance(theirs, dict) and isinstance(mine, dict)):
        return mine
    out = dict(theirs)
    for key in [*base, *(k for k in mine if k not in base)]:
        was, now = base.get(key, ABSENT), mine.get(key, ABSENT)
        if was == now:
            continue
        if now is ABSENT:
            out.pop(key, None)
        else:
            out[key] = mine_on_top(was, theirs.get(key, ABSENT), now)
    return out
