"""Time one full report (record + SVG maps + PDF) against reportlab drawing the same content.

Run ``python benchmarks/bench_report.py [STUDY.yaml]`` (default: the DEMO-0002 demo study, the one
with the most maps). Prints, in one run and on this machine:

* the full report in-process (``write_report``: record JSON, every SVG map, the PDF), target ≤ 150 ms;
* the PDF alone (``pdf_bytes``);
* the page baseline: reportlab itself (``renderPDF`` and the canvas) drawing the same map and
  legend shapes (the already-built Drawings) and the same text (every narrative, table and header
  string, pre-wrapped) on one page, plus, for a study with time-intensity curves
  (``reporting/data/demo/DEMO-0006.yaml``), the same fitted-curve grid on a second page;
* the outputs baseline: that page plus reportlab's own SVG rendering (``renderSVG``) of the same
  pre-built maps, since the full report also writes one SVG per map.

The like-for-like ratios, target ≤ 1.5×: the PDF against the page baseline, and the full report
(PDF + SVG maps + record) against the outputs baseline. The full report against the page alone is
printed too; it also counts the SVG documents the page baseline never makes.

Each figure is the median of several runs after one warm-up run (fonts registered, templates
compiled). This is a script, not a test: timings depend on the machine.
"""

from __future__ import annotations

import io
import statistics
import sys
import tempfile
import time
from collections.abc import Callable, Sequence
from pathlib import Path

import yaml
from reportlab.graphics import renderPDF, renderSVG
from reportlab.graphics.shapes import Drawing
from reportlab.lib.pagesizes import A4
from reportlab.lib.utils import simpleSplit
from reportlab.pdfgen.canvas import Canvas

from reporting.analysis import analyze, analyze_file
from reporting.demo import demo_study_text
from reporting.export.record import record_json
from reporting.load import study_from_data
from reporting.render import curves, diagram, narrative, pdf_bytes, write_report
from reporting.render.fonts import body_fonts
from reporting.render.legend import draw_legend, legend_items
from reporting.results import Analysis

RUNS = 15


def median_ms(action: Callable[[], object], runs: int = RUNS) -> float:
    action()  # warm-up
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return 1000 * statistics.median(times)


def load(argv: list[str]) -> Analysis:
    if len(argv) > 1:
        return analyze_file(Path(argv[1]))
    return analyze(study_from_data(yaml.safe_load(demo_study_text("DEMO-0002.yaml"))))


def baseline_content(analysis: Analysis) -> tuple[list[Drawing], list[str], list[Drawing]]:
    """The same shapes and text as the report, built once (not timed): maps and their legend
    strips, text, curve grid."""
    fonts = body_fonts()
    specs = diagram.map_specs(analysis)
    drawings = [
        diagram.bullseye(analysis, spec, radius=44, legend=False, fonts=fonts, width=127)
        for spec in specs
    ]
    kinds = dict.fromkeys(spec.kind for spec in specs)
    drawings += [draw_legend(legend_items(analysis, kind), A4[0] - 80, fonts) for kind in kinds]
    text = narrative.narrative_text(analysis)
    lines = [line for line in text.splitlines() if line]
    lines += record_json(analysis).splitlines()[:60]  # stands in for header and table cells
    grid = curves.curve_grid(analysis, A4[0] - 80, fonts)  # empty without curves
    return drawings, lines, grid


def draw_baseline(drawings: list[Drawing], lines: list[str], grid: Sequence[Drawing] = ()) -> bytes:
    """reportlab alone: one page of map drawings and text lines, a second with the curve grid."""
    fonts = body_fonts()
    buffer = io.BytesIO()
    canvas = Canvas(buffer, pagesize=A4, invariant=1)
    width, height = A4
    for i, drawing in enumerate(drawings):
        renderPDF.draw(drawing, canvas, 40 + (i % 4) * 128, height - 180 - (i // 4) * 150)
    canvas.setFont(fonts.regular, 5)
    y = height - 480
    for line in lines:
        for piece in simpleSplit(line, fonts.regular, 5, width - 80):
            canvas.drawString(40, y, piece)
            y = y - 6 if y > 40 else height - 480
    canvas.showPage()
    if grid:
        y = height - 40
        for drawing in grid:
            y -= drawing.height
            renderPDF.draw(drawing, canvas, 40, y)
        canvas.showPage()
    canvas.save()
    return buffer.getvalue()


def draw_svgs(drawings: list[Drawing]) -> list[str]:
    """reportlab alone: the pre-built standalone maps through renderSVG."""
    return [renderSVG.drawToString(d) for d in drawings]


def main(argv: list[str]) -> None:
    analysis = load(argv)
    with tempfile.TemporaryDirectory() as folder:
        full = median_ms(lambda: write_report(analysis, Path(folder)))
    pdf = median_ms(lambda: pdf_bytes(analysis))
    drawings, lines, grid = baseline_content(analysis)
    base = median_ms(lambda: draw_baseline(drawings, lines, grid))
    standalone = [diagram.bullseye(analysis, spec) for spec in diagram.map_specs(analysis)]
    svg_base = median_ms(lambda: draw_svgs(standalone))
    maps = len(diagram.map_specs(analysis))
    panels = sum(len(b.panels) for b in curves.curve_blocks(analysis))
    outputs = base + svg_base
    print(f"study {analysis.study.id}: {maps} maps, {panels} curve panels, median of {RUNS} runs")
    print(f"full report (record + {maps} SVG + PDF):    {full:7.1f} ms   target <= 150 ms")
    print(f"PDF alone:                             {pdf:7.1f} ms")
    print(f"reportlab, same shapes + text, 1 page: {base:7.1f} ms")
    print(f"reportlab, that page + {maps} SVG maps:     {outputs:7.1f} ms")
    print(f"PDF / reportlab page:                  {pdf / base:7.2f}    target <= 1.5")
    print(f"full report / reportlab page + SVGs:   {full / outputs:7.2f}    target <= 1.5")
    print(f"full report / reportlab page alone:    {full / base:7.2f}    (also counts the SVGs)")


if __name__ == "__main__":
    main(sys.argv)
