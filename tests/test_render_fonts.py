"""The packaged body font (reporting.render.fonts): every glyph the demo PDFs draw exists in it.

Oracle: fontTools reads the character map of the packaged TrueType files on its own, and pypdf
reports which font each piece of text in the PDFs was drawn with (through the PDF's ToUnicode maps).
"""

from __future__ import annotations

import io
from collections import defaultdict
from importlib import resources
from pathlib import Path
from typing import Any

import pytest
from fontTools.ttLib import TTFont  # type: ignore[import-untyped]
from pypdf import PdfReader

from reporting.demo import write_demo
from reporting.render import fonts

# The 14 standard PDF fonts need no embedding; the maps use Helvetica, limited to WinAnsi text.
STANDARD_FONTS = {"Helvetica", "Helvetica-Bold", "Helvetica-Oblique"}


def _cmap(filename: str) -> set[int]:
    data = resources.files("reporting.data").joinpath("fonts", filename).read_bytes()
    return set(TTFont(io.BytesIO(data)).getBestCmap())


@pytest.fixture(scope="module")
def demo_pdfs(tmp_path_factory: pytest.TempPathFactory) -> list[Path]:
    folder = tmp_path_factory.mktemp("demo")
    write_demo(folder)
    pdfs = sorted(folder.glob("*.pdf"))
    assert len(pdfs) == 6
    return pdfs


def _drawn(pdf: Path) -> tuple[dict[str, set[str]], dict[str, Any]]:
    """Characters drawn per base font name, and each font's dictionary."""
    chars: dict[str, set[str]] = defaultdict(set)
    dicts: dict[str, Any] = {}

    def visit(text: str, cm: Any, tm: Any, font: Any, size: Any) -> None:
        if font is None or not text.strip():
            return
        name = str(font["/BaseFont"]).lstrip("/")
        chars[name] |= {c for c in text if not c.isspace()}
        dicts[name] = font

    for page in PdfReader(pdf).pages:
        page.extract_text(visitor_text=visit)
    return chars, dicts


def test_packaged_fonts_are_the_body_fonts_with_their_licence() -> None:
    body = fonts.body_fonts()
    assert body.embedded and body.regular == "DejaVuSans"
    folder = resources.files("reporting.data").joinpath("fonts")
    for filename in fonts.BODY_FILES:
        assert folder.joinpath(filename).is_file(), filename
    assert "Permission is hereby granted" in folder.joinpath("LICENSE").read_text("utf-8")
    sources = resources.files("reporting.data").joinpath("SOURCES.md").read_text("utf-8")
    assert all(f"fonts/{f}" in sources for f in fonts.BODY_FILES)
    # reportlab's view of the font and fontTools' agree on the characters it covers.
    assert fonts.glyphs(body.regular) == frozenset(_cmap(fonts.BODY_FILES[0]))


def test_every_glyph_drawn_in_the_demo_pdfs_exists_in_its_font(demo_pdfs: list[Path]) -> None:
    cmaps = {
        "DejaVuSans": _cmap("DejaVuSans.ttf"),
        "DejaVuSans-Bold": _cmap("DejaVuSans-Bold.ttf"),
        "DejaVuSans-Oblique": _cmap("DejaVuSans-Oblique.ttf"),
    }
    seen_embedded = set()
    for pdf in demo_pdfs:
        chars, dicts = _drawn(pdf)
        assert chars, pdf.name
        for name, drawn in chars.items():
            # No text was replaced because a font lacked it.
            assert "\ufffd" not in drawn, (pdf.name, name)
            if name in STANDARD_FONTS:
                for c in drawn:
                    c.encode("cp1252")  # raises for a character Helvetica cannot show
                continue
            base = name.split("+")[-1]  # an embedded subset is named "TAG+<font name>"
            assert base in cmaps, (pdf.name, name)
            descriptor = dicts[name].get("/FontDescriptor")
            assert descriptor is not None and "/FontFile2" in descriptor.get_object(), name
            missing = {c for c in drawn if ord(c) not in cmaps[base]}
            assert not missing, (pdf.name, name, sorted(missing))
            seen_embedded.add(base)
    assert {"DejaVuSans", "DejaVuSans-Bold"} <= seen_embedded


def test_the_curve_page_draws_beta_in_the_embedded_font(demo_pdfs: list[Path]) -> None:
    pdf = next(p for p in demo_pdfs if p.name == "DEMO-0006.pdf")
    chars, _ = _drawn(pdf)
    in_body = {n for n, drawn in chars.items() if "β" in drawn}
    assert in_body and not in_body & STANDARD_FONTS
