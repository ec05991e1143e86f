"""Peeking at the first bytes of a study file for the entry page's folder listing.

The listing reads only the head of each file (:func:`reporting.documents.read_head`, regular files
only, no symbolic links) and takes the few values it shows from YAML parser events, so listing a
folder of large files stays quick and never builds a whole document.
"""

from __future__ import annotations

import logging
from typing import Any

log = logging.getLogger(__name__)

_NULLS = frozenset({"", "~", "null", "Null", "NULL"})


def peek_scalars(text: str, wanted: set[tuple[str, ...]]) -> dict[tuple[str, ...], str]:
    """Plain values at the ``wanted`` key paths of YAML or JSON text, read from parser events alone.

    Meant for the first bytes of a file: it stops once every wanted value is found, and a document
    cut short (or not YAML at all) just yields fewer values. Values are the text as written (a bare
    ``2026-10-14`` stays that text); a path holding a list or mapping gives nothing.
    """
    import yaml

    found: dict[tuple[str, ...], str] = {}
    # one entry per open container: [is_mapping, waiting_for_a_key, current_key]
    levels: list[list[Any]] = []
    try:
        for event in yaml.parse(text, Loader=getattr(yaml, "CSafeLoader", yaml.SafeLoader)):
            if isinstance(event, yaml.MappingStartEvent | yaml.SequenceStartEvent):
                if len(levels) >= 16 or (levels and levels[-1][0] and levels[-1][1]):
                    break  # deeper than any wanted path, or a container used as a key
                levels.append([isinstance(event, yaml.MappingStartEvent), True, None])
                continue
            if isinstance(event, yaml.MappingEndEvent | yaml.SequenceEndEvent):
                levels.pop()
            elif isinstance(event, yaml.ScalarEvent) and levels:
                level = levels[-1]
                if level[0] and level[1]:
                    level[1], level[2] = False, event.value
                    continue
                if all(lv[0] for lv in levels):
                    key = tuple(str(lv[2]) for lv in levels)
                    plain_null = not event.style and event.value in _NULLS
                    if key in wanted and not plain_null:
                        found[key] = event.value
                        if len(found) == len(wanted):
                            break
            elif isinstance(event, yaml.AliasEvent):
                break
            if levels and levels[-1][0]:
                levels[-1][1] = True
    except yaml.YAMLError:
        pass
    return found
