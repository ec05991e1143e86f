"""The fitted-curve grid of the PDF (reporting.render.curves): panels, poor-fit marks, stability.

Model drawn: y(t) = A(1 − e^(−βt)) + C (Wei K et al., Circulation 1998;97:473; offset C: Vogel R et
al., JACC 2005;45:754). Assertions are on extracted text (pypdf) and on the drawing structure, not on
bytes, except the byte-stability check.
"""

from __future__ import annotations

import io
from importlib import resources
from pathlib import Path

import pytest
import yaml
from pypdf import PdfReader
from reportlab.graphics.shapes import Drawing, Group, Rect, String
from reportlab.graphics.shapes import Path as PathShape

from reporting.analysis import analyze, analyze_file
from reporting.demo import demo_study_text
from reporting.kinetics.models import FitStatus
from reporting.load import study_from_data
from reporting.model import Stage
from reporting.render import curves, pdf_bytes
from reporting.render.fonts import MAP_FONTS, body_fonts
from reporting.results import Analysis
from reporting.segments import Territory

HEADING = "Fitted replenishment curves"
WIDTH = 510.0  # A4 less the report's margins


@pytest.fixture(scope="module")
def demo6(tmp_path_factory: pytest.TempPathFactory) -> Analysis:
    """DEMO-0006: vasodilator perfusion with time-intensity curves (one poor fit at the apex)."""
    folder = tmp_path_factory.mktemp("demo6")
    demo = resources.files("reporting.data").joinpath("demo")
    for name in ("DEMO-0006.yaml", "DEMO-0006.curves.csv"):
        (folder / name).write_bytes(demo.joinpath(name).read_bytes())
    return analyze_file(folder / "DEMO-0006.yaml")


def _pages(pdf: bytes) -> list[str]:
    return [" ".join(p.extract_text().split()) for p in PdfReader(io.BytesIO(pdf)).pages]


def _curve_page(pdf: bytes) -> str:
    pages = [p for p in _pages(pdf) if HEADING in p]
    assert len(pages) == 1
    return pages[0]


def _panels(drawing: Drawing) -> list[Group]:
    return [c for c in drawing.contents if isinstance(c, Group)]


def _strings(shape: Group) -> list[str]:
    out: list[str] = []
    for child in shape.contents:
        if isinstance(child, String):
            out.append(child.text)
        elif isinstance(child, Group):
            out += _strings(child)
    return out


@pytest.mark.parametrize("name", ["DEMO-0001", "DEMO-0002", "DEMO-0003", "DEMO-0004", "DEMO-0005"])
def test_no_grid_without_kinetics(name: str) -> None:
    analysis = analyze(study_from_data(yaml.safe_load(demo_study_text(f"{name}.yaml"))))
    assert analysis.kinetics is None
    assert curves.curve_grid(analysis, WIDTH) == []
    pages = _pages(pdf_bytes(analysis))
    assert len(pages) <= 2
    assert not any(HEADING in p for p in pages)


def test_grid_appears_with_kinetics_on_at_most_three_pages(demo6: Analysis) -> None:
    pdf = pdf_bytes(demo6)
    pages = _pages(pdf)
    assert len(pages) <= 3
    text = _curve_page(pdf)
    assert "y(t) = A(1 − e^(−βt)) + C (Wei K et al., Circulation 1998)" in text
    for territory in Territory:
        assert f"{territory.value} segments" in text
    # the sign-off still closes the report, after the grid
    assert "Signature" in pages[-1]


def test_one_panel_per_fitted_segment_grouped_by_territory(demo6: Analysis) -> None:
    assert demo6.kinetics is not None
    fitted = {f.number for f in demo6.kinetics.segments}
    blocks = curves.curve_blocks(demo6)
    numbers = [p.segment.number for b in blocks for p in b.panels]
    assert sorted(numbers) == sorted(fitted) and len(numbers) == len(fitted) == 17
    territory_of = {s.number: s.territory for s in demo6.segments}
    for block in blocks:
        assert all(territory_of[p.segment.number] is block.territory for p in block.panels)
        assert [p.segment.number for p in block.panels] == sorted(
            p.segment.number for p in block.panels
        )
        # each panel shows the rest and the peak fit of its segment
        assert all([f.stage for f in p.fits] == [Stage.REST, Stage.PEAK] for p in block.panels)
    assert [b.territory for b in blocks] == [Territory.LAD, Territory.LCX, Territory.RCA]
    drawings = curves.curve_grid(demo6, WIDTH)
    assert [len(_panels(d)) for d in drawings[1:]] == [len(b.panels) for b in blocks]
    text = _curve_page(pdf_bytes(demo6))
    for seg in demo6.segments:
        assert f"{seg.number} {seg.name}" in text


def test_panel_prints_beta_and_r_squared_of_each_fit(demo6: Analysis) -> None:
    assert demo6.kinetics is not None
    text = _curve_page(pdf_bytes(demo6))
    for fit in demo6.kinetics.segments:
        assert fit.beta is not None and fit.r_squared is not None
        stage = "rest" if fit.stage is Stage.REST else "peak"
        assert f"{stage} β {fit.beta:.2f} R² {fit.r_squared:.2f}" in text


def test_poor_fit_is_marked_with_hatching_and_its_status(demo6: Analysis) -> None:
    assert demo6.kinetics is not None
    poor = [f for f in demo6.kinetics.segments if f.status is not FitStatus.OK]
    assert [(f.number, f.stage, f.status) for f in poor] == [(17, Stage.PEAK, FitStatus.POOR_FIT)]
    assert "peak: poor fit" in _curve_page(pdf_bytes(demo6))
    lad = curves.curve_grid(demo6, WIDTH)[1]
    numbers = [p.segment.number for p in curves.curve_blocks(demo6)[0].panels]
    for number, panel in zip(numbers, _panels(lad), strict=True):
        hatched = any(
            isinstance(c, PathShape) and c.strokeColor == curves.HATCH_COLOUR
            for c in panel.contents
        )
        grey = any(
            isinstance(c, Rect) and c.fillColor == curves.FLAGGED_FILL for c in panel.contents
        )
        assert hatched is grey is (number == 17), number
        assert ("peak: poor fit" in _strings(panel)) is (number == 17)


def test_fits_without_parameters_show_the_status_in_words(demo6: Analysis) -> None:
    # a curve with too few frames has no A, β, C: data points only, status in words
    assert demo6.kinetics is not None
    fits = [
        f.model_copy(
            update={
                "status": FitStatus.TOO_FEW_FRAMES,
                "A": None,
                "beta": None,
                "C": None,
                "A_beta": None,
                "r_squared": None,
            }
        )
        if (f.number, f.stage) == (4, Stage.REST)
        else f
        for f in demo6.kinetics.segments
    ]
    kinetics = demo6.kinetics.model_copy(update={"segments": fits})
    text = _curve_page(pdf_bytes(demo6.model_copy(update={"kinetics": kinetics})))
    assert "rest: too few frames" in text and "rest: not fitted" in text


def test_four_stages_and_a_beta_at_bound_fit_render(demo6: Analysis) -> None:
    # a panel with a line per stage (rest, low dose, peak, recovery) still fits its frame
    assert demo6.kinetics is not None
    extra = [
        f.model_copy(update={"stage": stage})
        for f in demo6.kinetics.segments
        if f.stage is Stage.REST
        for stage in (Stage.LOW_DOSE, Stage.RECOVERY)
    ]
    fits = [
        f.model_copy(update={"status": FitStatus.BETA_AT_BOUND})
        if (f.number, f.stage) == (9, Stage.PEAK)
        else f
        for f in demo6.kinetics.segments
    ]
    kinetics = demo6.kinetics.model_copy(update={"segments": fits + extra})
    analysis = demo6.model_copy(update={"kinetics": kinetics})
    blocks = curves.curve_blocks(analysis)
    stages = [Stage.REST, Stage.LOW_DOSE, Stage.PEAK, Stage.RECOVERY]
    assert all([f.stage for f in p.fits] == stages for b in blocks for p in b.panels)
    pdf = pdf_bytes(analysis)
    assert len(_pages(pdf)) <= 3
    text = _curve_page(pdf)
    assert "low dose β" in text and "recovery β" in text
    assert "peak: β at bound" in text
    for drawing in curves.curve_grid(analysis, WIDTH)[1:]:
        for panel in _panels(drawing):
            frame = next(c for c in panel.contents if isinstance(c, Rect))
            _, y0, _, y1 = panel.getBounds()
            assert frame.y - 0.5 <= y0 and y1 <= frame.y + frame.height + 0.5


def test_segments_without_curves_are_named_and_empty_territories_left_out(
    demo6: Analysis,
) -> None:
    assert demo6.kinetics is not None
    rca = {s.number for s in demo6.segments if s.territory is Territory.RCA}
    fits = [f for f in demo6.kinetics.segments if f.number not in rca and f.number != 5]
    kinetics = demo6.kinetics.model_copy(update={"segments": fits})
    analysis = demo6.model_copy(update={"kinetics": kinetics})
    blocks = curves.curve_blocks(analysis)
    assert [b.territory for b in blocks] == [Territory.LAD, Territory.LCX]
    assert blocks[1].without_curves == (5,)
    assert "no curve for 5" in curves.territory_heading(blocks[1])


def test_same_input_gives_the_same_bytes(demo6: Analysis) -> None:
    assert pdf_bytes(demo6) == pdf_bytes(demo6)


def test_letter_paper_keeps_the_grid_within_three_pages(demo6: Analysis) -> None:
    pdf = pdf_bytes(demo6, paper="Letter")
    assert len(_pages(pdf)) <= 3
    assert "peak: poor fit" in _curve_page(pdf)


def test_panels_fit_their_columns_and_the_page_width(demo6: Analysis) -> None:
    for width in (WIDTH, 527.0, 300.0):
        drawings = curves.curve_grid(demo6, width)
        assert all(d.width == width for d in drawings)
        for drawing in drawings[1:]:
            for panel in _panels(drawing):
                x0, _, x1, _ = panel.getBounds()
                assert x0 >= -0.5 and x1 <= width + 0.5


def test_stages_differ_in_shape_and_line_not_only_colour() -> None:
    # readable in greyscale: each stage has its own marker and line style
    looks = list(curves.STAGE_LOOK.values())
    assert len({look.marker for look in looks}) == len(looks)
    assert len({look.dash for look in looks}) == len(looks)


@pytest.mark.parametrize(
    ("value", "top"),
    [(0.0, 1.0), (0.7, 0.8), (9.2, 10.0), (10.0, 10.0), (13.9, 15.0), (17.0, 20.0), (260.0, 300.0)],
)
def test_nice_top(value: float, top: float) -> None:
    assert curves.nice_top(value) == pytest.approx(top)


def test_time_axis_covers_every_frame(demo6: Analysis) -> None:
    assert demo6.kinetics is not None
    end, step = curves.time_axis(demo6)
    assert end >= max(t for f in demo6.kinetics.segments for t in f.time_s)
    assert end / step <= 4 and (end / step) == pytest.approx(round(end / step))


def test_beta_falls_back_to_a_word_without_a_greek_glyph(demo6: Analysis) -> None:
    assert demo6.kinetics is not None
    fit = demo6.kinetics.segments[0]
    assert curves.stat_text(fit, MAP_FONTS).startswith("rest beta ")
    # The packaged body font has β on every machine: no "or not embedded" escape.
    assert body_fonts().embedded
    assert "β" in curves.stat_text(fit, body_fonts())


# Hides every system font folder, as on a machine without DejaVu; then prints the curve page text.
_WITHOUT_SYSTEM_FONTS = """
import builtins, io, os, pathlib, sys
HIDDEN = ("/usr/share/fonts", "/usr/local/share/fonts", "/Library/Fonts", "C:/Windows/Fonts",
          os.path.expanduser("~/.fonts"), os.path.expanduser("~/.local/share/fonts"))
def hidden(path):
    return str(path).startswith(HIDDEN)
real_is_file, real_exists, real_open = pathlib.Path.is_file, pathlib.Path.exists, builtins.open
pathlib.Path.is_file = lambda self, *a, **k: not hidden(self) and real_is_file(self, *a, **k)
pathlib.Path.exists = lambda self, *a, **k: not hidden(self) and real_exists(self, *a, **k)
def guarded_open(file, *args, **kwargs):
    if isinstance(file, (str, os.PathLike)) and hidden(os.fspath(file)):
        raise FileNotFoundError(file)
    return real_open(file, *args, **kwargs)
builtins.open = io.open = guarded_open
from pypdf import PdfReader
from reporting.analysis import analyze_file
from reporting.render import pdf_bytes
analysis = analyze_file(sys.argv[1])
pdf = pdf_bytes(analysis)
print(" ".join(" ".join(p.extract_text() for p in PdfReader(io.BytesIO(pdf)).pages).split()))
"""


def test_greek_letters_print_on_a_machine_without_system_fonts(tmp_path: Path) -> None:
    # Issue 11 item 7: without a system DejaVu the old lookup fell back to a Latin-only font, and
    # "β" came out as a replacement mark. The packaged font makes the machine's fonts irrelevant.
    import subprocess
    import sys

    demo = resources.files("reporting.data").joinpath("demo")
    for name in ("DEMO-0006.yaml", "DEMO-0006.curves.csv"):
        (tmp_path / name).write_bytes(demo.joinpath(name).read_bytes())
    done = subprocess.run(
        [sys.executable, "-c", _WITHOUT_SYSTEM_FONTS, str(tmp_path / "DEMO-0006.yaml")],
        capture_output=True,
        text=True,
        check=False,
        cwd=Path(__file__).resolve().parent.parent,
    )
    assert done.returncode == 0, done.stderr
    assert "y(t) = A(1 − e^(−βt)) + C" in done.stdout
    assert "rest β " in done.stdout and "\ufffd" not in done.stdout
    assert "cannot use the packaged font" not in done.stderr


def test_grid_in_a_written_report(demo6: Analysis, tmp_path: Path) -> None:
    from reporting.render import write_report

    paths = write_report(demo6, tmp_path)
    pdf = next(p for p in paths if p.suffix == ".pdf").read_bytes()
    assert "peak: poor fit" in _curve_page(pdf)
