"""examples/demo is what `segreport demo` writes today (so the committed examples never go stale)."""

from __future__ import annotations

from pathlib import Path

from pypdf import PdfReader

from reporting.demo import write_demo

EXAMPLES = Path(__file__).resolve().parent.parent / "examples" / "demo"


def _pdf_text(path: Path) -> str:
    return "\n".join(page.extract_text() for page in PdfReader(path).pages)


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
        else:
            assert (EXAMPLES / name).read_bytes() == (tmp_path / name).read_bytes(), name
