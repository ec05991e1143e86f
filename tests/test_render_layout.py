"""Layout of the referring-doctor PDF (#13): a normal study on one page, merged all-normal maps,
and a sign-off that never stands alone on a page."""

from __future__ import annotations

import io
from importlib import resources
from pathlib import Path

import pytest
import yaml
from pypdf import PdfReader

from reporting.analysis import analyze, analyze_file
from reporting.demo import demo_study_text
from reporting.load import study_from_data
from reporting.model import Stage
from reporting.render import diagram, pdf_bytes
from reporting.render.scheme import MapKind
from reporting.results import Analysis


def _data(name: str) -> dict:
    return yaml.safe_load(demo_study_text(f"{name}.yaml"))


def _analysis(name: str) -> Analysis:
    return analyze(study_from_data(_data(name)))


def _demo_file_analysis(name: str, folder: Path) -> Analysis:
    """A demo study read from its file, with any curve file beside it (DEMO-0006)."""
    demo = resources.files("reporting.data").joinpath("demo")
    for entry in demo.iterdir():
        if entry.name.startswith(name):
            (folder / entry.name).write_bytes(entry.read_bytes())
    return analyze_file(folder / f"{name}.yaml")


def _pages(pdf: bytes) -> list[str]:
    return [page.extract_text() for page in PdfReader(io.BytesIO(pdf)).pages]


# page counts of the demo reports as they come out now; a normal study (DEMO-0001) on one page
PAGE_COUNTS = {
    "DEMO-0001": 1,
    "DEMO-0002": 2,
    "DEMO-0003": 2,
    "DEMO-0004": 2,
    "DEMO-0005": 2,
    "DEMO-0006": 3,
}


@pytest.mark.parametrize(("name", "pages"), PAGE_COUNTS.items(), ids=list(PAGE_COUNTS))
def test_demo_page_counts(name: str, pages: int, tmp_path: Path) -> None:
    assert len(_pages(pdf_bytes(_demo_file_analysis(name, tmp_path)))) == pages


def test_identical_all_normal_stages_share_one_map_with_a_caption() -> None:
    analysis = _analysis("DEMO-0001")  # every segment normal at rest, low dose, peak, recovery
    specs = diagram.page_map_specs(analysis)
    assert [s.kind for s in specs] == [MapKind.WALL_MOTION, MapKind.SEGMENTS]
    assert specs[0].merged == (Stage.REST, Stage.LOW_DOSE, Stage.PEAK, Stage.RECOVERY)
    assert specs[0].title == "Wall motion – all stages"
    assert diagram.caption(analysis, specs[0]) == "All segments normal at every stage"
    text = _pages(pdf_bytes(analysis))[0]
    assert "Wall motion – all stages" in text
    assert "Wall motion – rest" not in text
    # the SVG files keep one map per stage
    assert len([s for s in diagram.map_specs(analysis) if s.kind is MapKind.WALL_MOTION]) == 4


def test_two_normal_stages_are_named_in_the_caption() -> None:
    analysis = _analysis("DEMO-0006")  # vasodilator study: wall motion normal at rest and peak
    (wall,) = [s for s in diagram.page_map_specs(analysis) if s.kind is MapKind.WALL_MOTION]
    assert wall.title == "Wall motion – rest and peak"
    assert diagram.caption(analysis, wall) == "Rest and peak: all segments normal"


@pytest.mark.parametrize("name", ["DEMO-0002", "DEMO-0004", "DEMO-0005"])
def test_a_map_with_anything_abnormal_or_unseen_is_not_merged(name: str) -> None:
    analysis = _analysis(name)
    assert diagram.page_map_specs(analysis) == diagram.map_specs(analysis)


def test_an_unseen_segment_keeps_the_stages_apart() -> None:
    data = _data("DEMO-0001")
    data["stages"]["peak"]["wall_motion"] = "x" + "1" * 16  # segment 1 not visualised at peak
    analysis = analyze(study_from_data(data))
    walls = [s for s in diagram.page_map_specs(analysis) if s.kind is MapKind.WALL_MOTION]
    assert len(walls) == 4 and all(not s.merged for s in walls)


def test_exercise_maps_are_titled_with_workload_words() -> None:
    # "low dose" belongs to dobutamine only; exercise studies have workload stages [common practice]
    titles = [s.title for s in diagram.map_specs(_analysis("DEMO-0004"))]
    assert "Wall motion – peak exercise" in titles
    assert not any("dose" in t for t in titles)


def test_the_sign_off_never_stands_alone_on_a_page() -> None:
    """Longer and longer reader impressions push the sign-off over a page break; wherever it
    lands, the Methods line (the text before it) is on the same page."""
    data = _data("DEMO-0001")
    moved = 0
    for sentences in range(0, 44, 3):
        data["impression"] = " ".join(
            f"Sentence {i} of the reader's impression, written out at some length."
            for i in range(sentences)
        )
        pages = _pages(pdf_bytes(analyze(study_from_data(data))))
        (signed,) = [i for i, text in enumerate(pages) if "Signature" in text]
        assert "Methods." in pages[signed], sentences
        moved += signed > 0
    assert moved  # the sweep did push the sign-off to a later page


def test_a_heading_never_ends_a_column() -> None:
    from reporting.render.fonts import body_fonts
    from reporting.render.paragraph_styles import paragraph_styles
    from reporting.render.pdf.heading import HeadedParagraph
    from reporting.render.pdf.text import PlainText

    st = paragraph_styles(body_fonts())
    body = PlainText(" ".join(["a sentence of the section"] * 30), st["para"])
    block = HeadedParagraph(PlainText("Wall motion", st["h2"]), body)
    _, height = block.wrap(250, 1000)
    heading = st["h2"].leading
    # room for the heading and one line: nothing stays behind, all of it moves on
    assert block.split(250, heading + st["h2"].spaceAfter + st["para"].leading) == []
    # room for the heading and several lines: the heading stays with the first lines
    first, rest = block.split(250, height / 2)
    assert isinstance(first, HeadedParagraph) and first.heading.text == "Wall motion"
    assert isinstance(rest, PlainText)
