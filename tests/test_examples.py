"""examples/demo is what `segreport demo` writes today (so the committed examples never go stale)."""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

from pypdf import PdfReader

from reporting.demo import write_demo

EXAMPLES = Path(__file__).resolve().parent.parent / "examples" / "demo"


def _pdf_text(path: Path) -> str:
    return "\n".join(page.extract_text() for page in PdfReader(path).pages)


def _same_json(a: Any, b: Any) -> bool:
    """Equal JSON values, floats equal to 1e-9 relative.

    Fitted kinetic parameters may differ in the last digit between machines (the BLAS kernel
    chosen for the CPU changes the order of floating-point sums); anything larger is a real change.
    """
    if type(a) is not type(b):
        return False
    if isinstance(a, float):
        return math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-12)
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_same_json(a[k], b[k]) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_same_json(x, y) for x, y in zip(a, b, strict=True))
    return bool(a == b)


def test_examples_match_a_fresh_demo(tmp_path: Path) -> None:
    write_demo(tmp_path)
    fresh = sorted(p.name for p in tmp_path.iterdir())
    assert sorted(p.name for p in EXAMPLES.iterdir()) == fresh, (
        "run `segreport demo -o examples/demo`"
    )
    for name in fresh:
        if name.endswith(".pdf"):
            # Compared as text: the layout bytes depend on the fonts a machine has.
            assert _pdf_text(EXAMPLES / name) == _pdf_text(tmp_path / name), name
        elif name.endswith(".json"):
            committed = json.loads((EXAMPLES / name).read_text(encoding="utf-8"))
            assert _same_json(committed, json.loads((tmp_path / name).read_text("utf-8"))), name
        else:
            assert (EXAMPLES / name).read_bytes() == (tmp_path / name).read_bytes(), name


def test_json_comparison_tolerates_last_digits_only() -> None:
    assert _same_json({"a": [1, 10.079547704376067]}, {"a": [1, 10.079547704376068]})
    assert not _same_json({"a": 10.0795}, {"a": 10.0796})
    assert not _same_json({"a": 1}, {"a": 1.0})  # a type change is a real change
    assert not _same_json({"a": True}, {"a": 1})
    assert not _same_json({"a": 1}, {"b": 1})
