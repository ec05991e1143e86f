"""Field-by-field three-way differences of a study (base, theirs, mine) and "mine on top".

Property-based (hypothesis): the merge keeps theirs where only theirs changed and mine where mine
changed; the change list names exactly the leaves where either side differs from the base.
"""

from __future__ import annotations

from typing import Any

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from reporting.store.conflicts import ABSENT, changes, leaves, mine_on_top

KEYS = st.sampled_from(["rest", "peak", "wall_motion", "1", "2", "7", "17", "indication"])
SCALARS = st.one_of(st.none(), st.integers(1, 5), st.sampled_from(["x", "chest pain", ""]))
JSON = st.recursive(
    SCALARS | st.lists(SCALARS, max_size=3),
    lambda inner: st.dictionaries(KEYS, inner, max_size=4),
    max_leaves=8,
)
OBJECTS = st.dictionaries(KEYS, JSON, max_size=4)
QUICK = settings(max_examples=150, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def edited(draw: st.DrawFn, base: dict[str, Any]) -> dict[str, Any]:
    """``base`` with some of its leaves given new values (same shape)."""
    flat = leaves(base)
    out = base
    for path in flat:
        if path and draw(st.booleans()):
            out = _set(out, path, draw(SCALARS))
    return out


def _set(value: Any, path: tuple[str, ...], leaf: Any) -> Any:
    if not path:
        return leaf
    copy = dict(value)
    copy[path[0]] = _set(value[path[0]], path[1:], leaf)
    return copy


@QUICK
@given(OBJECTS, OBJECTS)
def test_unchanged_theirs_gives_mine_and_unchanged_mine_gives_theirs(
    base: dict[str, Any], other: dict[str, Any]
) -> None:
    assert mine_on_top(base, base, other) == other
    assert mine_on_top(base, other, base) == other


@QUICK
@given(st.data(), OBJECTS)
def test_leaf_edits_merge_field_by_field(data: st.DataObject, base: dict[str, Any]) -> None:
    theirs, mine = data.draw(edited(base)), data.draw(edited(base))
    merged = leaves(mine_on_top(base, theirs, mine))
    b, t, m = leaves(base), leaves(theirs), leaves(mine)
    assert set(merged) == set(b)
    for path, was in b.items():
        # mine where I changed the field, theirs otherwise (their change, or nobody's)
        assert merged[path] == (m[path] if m[path] != was else t[path])
    listed = {c.path: c for c in changes(base, theirs, mine)}
    assert set(listed) == {p for p in b if t[p] != b[p] or m[p] != b[p]}
    for path, change in listed.items():
        assert (change.base, change.theirs, change.mine) == (b[path], t[path], m[path])
        assert change.conflict == (t[path] != b[path] and m[path] != b[path] and t[path] != m[path])


@QUICK
@given(OBJECTS, OBJECTS, OBJECTS)
def test_any_three_versions_list_every_differing_leaf(
    base: dict[str, Any], theirs: dict[str, Any], mine: dict[str, Any]
) -> None:
    found = changes(base, theirs, mine)
    for change in found:
        assert change.theirs != change.base or change.mine != change.base
        shown = change.as_json()
        assert shown["path"] == ".".join(change.path)
        assert shown["mine_present"] == (change.mine is not ABSENT)
    # where no side differs from base, nothing is listed
    assert changes(base, base, base) == []


def test_a_removed_key_is_removed_and_their_new_key_kept() -> None:
    base = {"stages": {"peak": {"wall_motion": {"7": 1, "8": 1}}}, "indication": "a"}
    theirs = {
        "stages": {"peak": {"wall_motion": {"7": 1, "8": 3}}},
        "indication": "a",
        "notes": "n",
    }
    mine = {"stages": {"peak": {"wall_motion": {"7": 2, "8": 1}}}}
    merged = mine_on_top(base, theirs, mine)
    assert merged == {"stages": {"peak": {"wall_motion": {"7": 2, "8": 3}}}, "notes": "n"}
    shown = {c.dotted: c.as_json() for c in changes(base, theirs, mine)}
    assert shown["stages.peak.wall_motion.7"]["conflict"] is False
    assert shown["indication"]["mine_present"] is False
    assert list(shown) == [
        "indication",
        "notes",
        "stages.peak.wall_motion.7",
        "stages.peak.wall_motion.8",
    ]


def test_both_changing_one_field_differently_is_a_conflict() -> None:
    (change,) = changes({"a": 1}, {"a": 2}, {"a": 3})
    assert change.conflict and mine_on_top({"a": 1}, {"a": 2}, {"a": 3}) == {"a": 3}
    (same,) = changes({"a": 1}, {"a": 2}, {"a": 2})
    assert not same.conflict  # both made the same change
