"""Plain-text paragraphs of the PDF (reporting.render.pdf.text) against reportlab's Paragraph.

reportlab's Paragraph is the oracle (reference library): where all of its lines fit the column, our
greedy line breaking must give the same lines. Paragraph lets a line run up to a small space-shrink
allowance past the column; ours never does, which the properties below check.
"""

from __future__ import annotations

import io
import itertools

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from pypdf import PdfReader
from reportlab.lib.enums import TA_RIGHT
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.utils import simpleSplit
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.platypus import Paragraph, SimpleDocTemplate
from reportlab.platypus.flowables import Spacer

from reporting.render.fonts import body_fonts
from reporting.render.pdf import text as text_module
from reporting.render.pdf.styles import paragraph_styles
from reporting.render.pdf.text import PlainText, wrap_lines

FONTS = body_fonts()
STYLE: ParagraphStyle = paragraph_styles(FONTS)["para"]
FONT, SIZE = STYLE.fontName, STYLE.fontSize

words = st.text(
    alphabet=st.sampled_from("abcdefghijklmnopqrstuvwxyzABCDEFGHIJ0123456789.,;:()–-ÄéßЖ日\u00a0%"),
    min_size=1,
    max_size=14,
).filter(lambda w: w == w.strip())  # no-break spaces inside words only, as written

texts = st.lists(words, min_size=1, max_size=60).map(" ".join)


def _width(line: str) -> float:
    return float(stringWidth(line, FONT, SIZE))


@settings(max_examples=150, deadline=None)
@given(text=texts, width=st.floats(min_value=60, max_value=520))
def test_lines_match_paragraph_wherever_paragraph_fits(text: str, width: float) -> None:
    ours = wrap_lines(text, FONT, SIZE, width)
    para = Paragraph(text, STYLE)
    para.wrap(width, 10_000)
    theirs = [" ".join(words) for _, words in para.blPara.lines]
    # words as we see them: separated by spaces only (a no-break space joins)
    if all(_width(line) <= width for line in theirs) and all(
        _width(w) <= width for w in text.split(" ")
    ):
        assert ours == theirs


@settings(max_examples=150, deadline=None)
@given(
    chunks=st.lists(texts | st.text(alphabet="xyzÅ", min_size=30, max_size=120), max_size=4),
    width=st.floats(min_value=20, max_value=300),
)
def test_lines_fit_keep_every_character_and_are_greedy(chunks: list[str], width: float) -> None:
    text = "\n".join(chunks)
    lines = wrap_lines(text, FONT, SIZE, width)
    # nothing wider than the column unless a single character is (never at these widths)
    assert all(_width(line) <= width + 1e-9 for line in lines)
    # the same characters in the same order, spaces aside
    assert "".join(lines).replace(" ", "") == text.replace(" ", "").replace("\n", "")
    # explicit line breaks are kept: the chunks wrap on their own
    per_chunk = [wrap_lines(chunk, FONT, SIZE, width) for chunk in text.split("\n")]
    assert lines == [line for chunk_lines in per_chunk for line in chunk_lines]
    # greedy: within a chunk of words that each fit the column, the next line's first word would
    # not have fitted on this line (a wider word starts a line of its own, then is broken)
    for chunk, chunk_lines in zip(text.split("\n"), per_chunk, strict=True):
        if all(_width(word) <= width for word in chunk.split(" ")):
            for line, following in itertools.pairwise(chunk_lines):
                assert _width(line + " " + following.split(" ")[0]) > width


def test_a_long_word_is_broken_between_characters() -> None:
    word = "Pneumonoultramicroscopicsilicovolcanoconiosis" * 3
    lines = wrap_lines(f"see {word} here", FONT, SIZE, 80)
    assert lines[0] == "see"
    assert "".join(lines[1:]).replace(" ", "") == word + "here"
    assert len(lines) > 4
    assert all(_width(line) <= 80 for line in lines)


def test_explicit_line_breaks_and_blank_lines_are_kept() -> None:
    assert wrap_lines("first\n\nthird  line", FONT, SIZE, 500) == ["first", "", "third line"]


def _lines(flowables: list[PlainText]) -> list[str]:
    return [line for f in flowables for line in f.lines]


@pytest.mark.parametrize(
    "room_lines, expected_head",
    [
        (0, None),  # no room: nothing goes here
        (1, None),  # one line would be an orphan: the paragraph moves on whole
        (2, 2),
        (4, 4),
        (5, 5),  # everything fits
    ],
    ids=["no room", "orphan refused", "two lines", "four lines", "all"],
)
def test_split_between_lines_without_orphans(room_lines: int, expected_head: int | None) -> None:
    text = "\n".join(f"line {i}" for i in range(5))
    para = PlainText(text, STYLE)
    para.wrap(300, 1000)
    parts = para.split(300, room_lines * STYLE.leading + 0.5)
    if expected_head is None:
        assert parts == []
        return
    if expected_head == 5:
        assert parts == [para]
        return
    head, tail = parts
    head.wrap(300, 1000)
    tail.wrap(300, 1000)
    assert len(head.lines) == expected_head
    assert _lines([head, tail]) == [f"line {i}" for i in range(5)]
    assert head.getSpaceAfter() == 0 and tail.getSpaceBefore() == 0


def test_widows_refused_when_the_style_says_so() -> None:
    strict = ParagraphStyle("strict", parent=STYLE, allowWidows=0)
    para = PlainText("\n".join(f"line {i}" for i in range(5)), strict)
    para.wrap(300, 1000)
    head, tail = para.split(300, 4 * STYLE.leading + 0.5)
    head.wrap(300, 1000)
    tail.wrap(300, 1000)
    assert (len(head.lines), len(tail.lines)) == (3, 2)


def test_other_alignments_are_refused() -> None:
    with pytest.raises(ValueError, match="left-aligned"):
        PlainText("x", ParagraphStyle("r", parent=STYLE, alignment=TA_RIGHT))


def test_a_long_paragraph_flows_over_pages_with_every_line_printed() -> None:
    text = " ".join(f"word{i}" for i in range(1500)) + " <b>&</para> 日本語"
    buffer = io.BytesIO()
    doc = SimpleDocTemplate(buffer, invariant=1)
    doc.build([Spacer(1, 600), PlainText(text, STYLE)])
    reader = PdfReader(buffer)
    assert len(reader.pages) >= 3
    printed = " ".join(page.extract_text() for page in reader.pages).split()
    assert [w for w in printed if w.startswith("word")] == [f"word{i}" for i in range(1500)]
    assert "<b>&</para>" in printed


@pytest.mark.parametrize(
    "text, markup",
    [
        ("", ""),
        ("   ", "   "),
        ("a\n", "a<br/>"),
        ("\n", "<br/>"),
        ("one\ntwo", "one<br/>two"),
        ("one\n\nthree", "one<br/><br/>three"),
    ],
    ids=["empty", "spaces", "trailing break", "only a break", "two lines", "blank line inside"],
)
def test_height_matches_paragraph(text: str, markup: str) -> None:
    """Blank text takes no room and a trailing line break adds no line, as in Paragraph."""
    ours = PlainText(text, STYLE).wrap(300, 1000)[1]
    theirs = Paragraph(markup, STYLE).wrap(300, 1000)[1]
    assert ours == theirs


def _baselines(flowable: object) -> dict[str, float]:
    """The baseline height of each text run drawn by ``flowable`` on a page, via pypdf."""
    buffer = io.BytesIO()
    SimpleDocTemplate(buffer, invariant=1).build([flowable, PlainText("after", STYLE)])
    found: dict[str, float] = {}

    def visit(text: str, cm: list[float], tm: list[float], *_: object) -> None:
        if text.strip():
            found[text.strip()] = round(cm[5] + tm[5] * cm[3], 2)

    PdfReader(buffer).pages[0].extract_text(visitor_text=visit)
    return found


def test_lines_sit_where_paragraph_puts_them_even_after_a_blank_line() -> None:
    ours = _baselines(PlainText("first\n\nthird line", STYLE))
    theirs = _baselines(Paragraph("first<br/><br/>third line", STYLE))
    assert ours == theirs
    assert {"first", "third line", "after"} <= set(ours)


@pytest.mark.parametrize("nbsp", ["\u00a0", "\u202f", "\u2007"], ids=["nbsp", "narrow", "figure"])
def test_no_break_spaces_keep_words_together(nbsp: str) -> None:
    """Unicode's no-break spaces never break a line (Paragraph does break at U+202F)."""
    text = f"Peak heart rate reached 100{nbsp}% of predicted maximum today"
    for width in (100, 130, 160):
        lines = wrap_lines(text, FONT, SIZE, width)
        assert not any(line.startswith("%") for line in lines), (width, lines)
        assert any(f"100{nbsp}%" in line for line in lines)


@pytest.mark.parametrize(
    "feature", ["leftIndent", "rightIndent", "firstLineIndent", "borderWidth"], ids=str
)
def test_style_features_it_cannot_draw_are_refused(feature: str) -> None:
    with pytest.raises(ValueError, match=feature):
        PlainText("x", ParagraphStyle("indented", parent=STYLE, **{feature: 6}))


def test_min_width_is_the_widest_word() -> None:
    para = PlainText("a b widest\nshort", STYLE)
    assert para.minWidth() == pytest.approx(_width("widest"))


plain_words = st.text(
    alphabet=st.sampled_from("abcdefghijklmnopqrstuvwxyzABCDEFGHIJ0123456789.,;:()–-ÄéßЖ日%"),
    min_size=1,
    max_size=14,
)


@settings(max_examples=2000, deadline=None)
@given(words=st.lists(plain_words, min_size=1, max_size=60), width=st.floats(60, 520))
def test_our_line_filling_gives_simple_splits_lines(words: list[str], width: float) -> None:
    """Our line filler (each word measured once, and no break at a no-break space, where
    reportlab's public simpleSplit would break) fills lines exactly as simpleSplit does (the
    oracle) for text without no-break spaces."""
    pieces = text_module._pieces(words, FONT, SIZE, width)
    assert all(w == _width(piece) for piece, w in pieces)
    assert text_module._greedy(pieces, FONT, SIZE, width) == simpleSplit(
        " ".join(piece for piece, _ in pieces), FONT, SIZE, width
    )


@settings(max_examples=2000, deadline=None)
@given(words=st.lists(plain_words, min_size=1, max_size=60), width=st.floats(60, 520))
def test_plain_lines_are_simple_splits_lines(words: list[str], width: float) -> None:
    """Without over-long words or no-break spaces, the lines are reportlab's simpleSplit's."""
    text = " ".join(words)
    if all(_width(w) <= width for w in words):
        assert wrap_lines(text, FONT, SIZE, width) == simpleSplit(text, FONT, SIZE, width)


@settings(max_examples=300, deadline=None)
@given(
    words=st.lists(plain_words, min_size=2, max_size=30),
    font=st.sampled_from([FONT, "Helvetica"]),
    size=st.sampled_from([SIZE, 10.0, 7.3]),
)
def test_a_column_exactly_as_wide_as_a_line_breaks_as_simple_split_does(
    words: list[str], font: str, size: float
) -> None:
    """Widths that equal a line's running width to the last bit, summed in simpleSplit's order and
    in the other order, where the two orders can differ by one unit in the last place (random
    float widths almost never hit them). simpleSplit is the oracle."""
    space = float(stringWidth(" ", font, size))
    simple_order, other_order, widths = -space, -space, set()
    for word in words:
        w = float(stringWidth(word, font, size))
        simple_order = simple_order + space + w  # simpleSplit's own sum, in its order
        other_order += space + w
        widths |= {simple_order, other_order}
    text = " ".join(words)
    for width in sorted(widths):
        if all(stringWidth(w, font, size) <= width for w in words):
            assert wrap_lines(text, font, size, width) == simpleSplit(text, font, size, width)
