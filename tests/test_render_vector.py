"""Our SVG writer and PDF painter (reporting.render.vector) against reportlab's own renderers.

reportlab's renderSVG and renderPDF serve as the oracle (reference library): the same drawings must
give the same elements, text and colours in SVG, and the same pixels on a PDF page (pages rasterised
with poppler's pdftoppm, the Debian package poppler-utils that `.ci/run` installs).
"""

from __future__ import annotations

import io
import math
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from collections import Counter
from importlib import resources
from pathlib import Path

import pytest
from reportlab.graphics import renderPDF, renderSVG
from reportlab.graphics.shapes import (
    Circle,
    Drawing,
    Ellipse,
    Group,
    Line,
    PolyLine,
    Rect,
    String,
)
from reportlab.graphics.shapes import Path as RLPath
from reportlab.lib import colors
from reportlab.pdfgen.canvas import Canvas

from reporting.analysis import analyze_file
from reporting.render import curves, diagram, vector
from reporting.render.fonts import MAP_FONTS
from reporting.render.legend import draw_legend, legend_items
from reporting.results import Analysis

SVG_NS = "{http://www.w3.org/2000/svg}"
SHAPE_TAGS = ("path", "circle", "rect", "line", "polyline", "text")
# reportlab writes lines and polylines as <path>; compare them as paths
KIND = {"line": "path", "polyline": "path"}


def _analysis(name: str) -> Analysis:
    """A demo study analysed from its file, so DEMO-0006 finds its time-intensity curves."""
    with resources.as_file(resources.files("reporting.data").joinpath("demo", name)) as path:
        return analyze_file(path)


def _drawings() -> list[tuple[str, Drawing]]:
    """Every kind of drawing the report makes: maps, legends and a curve grid."""
    out: list[tuple[str, Drawing]] = []
    # DEMO-0006 adds the flow-reserve map and the fitted-curve grid
    for name in ("DEMO-0002.yaml", "DEMO-0006.yaml"):
        analysis = _analysis(name)
        for spec in diagram.map_specs(analysis):
            out.append((f"{name}:{spec.key}", diagram.bullseye(analysis, spec)))
            items = legend_items(analysis, spec.kind)
            out.append((f"{name}:{spec.key}:legend", draw_legend(items, 400, MAP_FONTS)))
    grid = curves.curve_grid(_analysis("DEMO-0006.yaml"), 500, MAP_FONTS)
    out += [(f"curves:{i}", d) for i, d in enumerate(grid)]
    return out


def _features() -> Drawing:
    """Options the report's drawings do not all use yet: an open path with a fill colour (not
    filled, as in reportlab), dashes with a phase, colours with alpha, right-anchored text, nested
    rotated groups, polylines and rectangles."""
    drawing = Drawing(300, 200)
    drawing.add(
        RLPath(
            points=[10, 10, 80, 60, 150, 10],
            operators=[0, 1, 1],
            fillColor=colors.red,
            strokeColor=colors.black,
            strokeWidth=2,
        )
    )
    drawing.add(
        PolyLine(
            [10, 100, 60, 150, 110, 100, 160, 150],
            strokeColor=colors.Color(0, 0, 1, alpha=0.5),
            strokeWidth=3,
            strokeDashArray=(3, [6, 2]),
            strokeLineCap=1,
        )
    )
    drawing.add(
        Rect(200, 20, 60, 40, fillColor=colors.Color(0, 0.6, 0, alpha=0.4), strokeColor=None)
    )
    outer = Group(Line(0, 0, 40, 0, strokeColor=colors.black, strokeWidth=1.5))
    inner = Group(String(0, 5, "turned", fontName="Helvetica", fontSize=9, textAnchor="end"))
    inner.rotate(30)
    outer.add(inner)
    outer.translate(220, 120)
    outer.rotate(-20)
    drawing.add(outer)
    drawing.add(String(290, 185, "right", fontName="Helvetica-Bold", fontSize=11, textAnchor="end"))
    return drawing


DRAWINGS = [*_drawings(), ("features", _features())]


def _kind(element: ET.Element) -> str:
    tag = element.tag.removeprefix(SVG_NS)
    return KIND.get(tag, tag)


def _elements(root: ET.Element) -> list[ET.Element]:
    """Drawn elements in document order, leaving out clipping paths and titles."""
    skip = {id(e) for clip in root.iter(f"{SVG_NS}clipPath") for e in clip.iter()}
    return [
        e for e in root.iter() if id(e) not in skip and e.tag.removeprefix(SVG_NS) in SHAPE_TAGS
    ]


def _rgb(element: ET.Element, prop: str) -> tuple[int, int, int] | None:
    """A fill or stroke colour as 0–255 RGB, from an attribute (ours) or a style (reportlab's)."""
    value = element.get(prop)
    if value is None:
        found = re.search(rf"(?:^|;)\s*{prop}:\s*([^;]+)", element.get("style", ""))
        value = found.group(1).strip() if found else None
    if value is None or value.lower() == "none":  # reportlab writes "None" for polylines
        return None
    if value.startswith("#"):
        return (int(value[1:3], 16), int(value[3:5], 16), int(value[5:7], 16))
    percents = re.fullmatch(r"rgb\(([\d.]+)%,\s*([\d.]+)%,\s*([\d.]+)%\)", value)
    assert percents, value
    return tuple(round(float(p) * 2.55) for p in percents.groups())  # type: ignore[return-value]


def _same(a: tuple[int, int, int] | None, b: tuple[int, int, int] | None) -> bool:
    """Equal colours; reportlab writes whole percents, so channels may differ by up to 2.55."""
    if a is None or b is None:
        return a is b
    return all(abs(x - y) <= 3 for x, y in zip(a, b, strict=True))


@pytest.mark.parametrize("name,drawing", DRAWINGS, ids=[n for n, _ in DRAWINGS])
def test_svg_matches_reportlabs_renderer(name: str, drawing: Drawing) -> None:
    ours = ET.fromstring(vector.svg_document(drawing, title="t").encode("utf-8"))
    theirs = ET.fromstring(renderSVG.drawToString(drawing).encode("utf-8"))
    mine, ref = _elements(ours), _elements(theirs)
    assert Counter(map(_kind, mine)) == Counter(map(_kind, ref))
    for a, b in zip(mine, ref, strict=True):
        assert _kind(a) == _kind(b), name
        if _kind(a) == "text":
            assert a.text == b.text
            assert _same(_rgb(a, "fill"), _rgb(b, "fill")), (name, a.text)
        else:
            assert _same(_rgb(a, "fill"), _rgb(b, "fill")), (name, a.tag)
            assert _same(_rgb(a, "stroke"), _rgb(b, "stroke")), (name, a.tag)


Affine = tuple[float, float, float, float, float, float]
IDENTITY: Affine = (1, 0, 0, 1, 0, 0)
NUMBER = re.compile(r"-?\d+(?:\.\d+)?(?:e-?\d+)?")


def _compose(outer: Affine, inner: Affine) -> Affine:
    a, b, c, d, e, f = outer
    p, q, r, s_, t, u = inner
    return (
        a * p + c * q,
        b * p + d * q,
        a * r + c * s_,
        b * r + d * s_,
        a * t + c * u + e,
        b * t + d * u + f,
    )


def _transform(text: str | None) -> Affine:
    """An SVG transform attribute (matrix, translate, scale, rotate) as one affine matrix."""
    result = IDENTITY
    for name, args in re.findall(r"(\w+)\(([^)]*)\)", text or ""):
        v = [float(x) for x in NUMBER.findall(args)]
        if name == "matrix":
            step: Affine = (v[0], v[1], v[2], v[3], v[4], v[5])
        elif name == "translate":
            step = (1, 0, 0, 1, v[0], v[1] if len(v) > 1 else 0)
        elif name == "scale":
            step = (v[0], 0, 0, v[1] if len(v) > 1 else v[0], 0, 0)
        elif name == "rotate":
            cos, sin = math.cos(math.radians(v[0])), math.sin(math.radians(v[0]))
            step = (cos, sin, -sin, cos, 0, 0)
        else:
            raise AssertionError(f"unexpected transform {name}")
        result = _compose(result, step)
    return result


def _points(element: ET.Element) -> list[float]:
    """The defining points of a shape, in its own coordinates, flattened."""
    kind = element.tag.removeprefix(SVG_NS)
    g = element.get
    if kind == "path":
        return [float(x) for x in NUMBER.findall(g("d", ""))]
    if kind == "polyline":
        return [float(x) for x in NUMBER.findall(g("points", ""))]
    if kind == "line":
        return [float(g(k, "0")) for k in ("x1", "y1", "x2", "y2")]
    if kind == "rect":
        x, y, w, h = (float(g(k, "0")) for k in ("x", "y", "width", "height"))
        return [x, y, x + w, y + h]
    x, y, r = (float(g(k, "0")) for k in ("cx", "cy", "r"))
    return [x, y, x + r, y]


def _geometry(root: ET.Element) -> list[list[float]]:
    """Every non-text shape's points in drawing coordinates, in document order.

    Starts below the root group that flips the y axis (reportlab rounds its height there), so both
    outputs are compared in the drawing's own coordinates.
    """
    (flip,) = [g for g in root if g.tag == f"{SVG_NS}g"]
    out: list[list[float]] = []

    def walk(element: ET.Element, matrix: Affine) -> None:
        for child in element:
            kind = child.tag.removeprefix(SVG_NS)
            if kind in ("clipPath", "title", "text"):
                continue
            here = _compose(matrix, _transform(child.get("transform")))
            if kind == "g":
                walk(child, here)
            elif kind in SHAPE_TAGS:
                flat = _points(child)
                a, b, c, d, e, f = here
                out.append(
                    [
                        v
                        for x, y in zip(flat[::2], flat[1::2], strict=True)
                        for v in (a * x + c * y + e, b * x + d * y + f)
                    ]
                )

    walk(flip, IDENTITY)
    return out


@pytest.mark.parametrize("name,drawing", DRAWINGS, ids=[n for n, _ in DRAWINGS])
def test_svg_geometry_matches_reportlabs_renderer(name: str, drawing: Drawing) -> None:
    ours = _geometry(ET.fromstring(vector.svg_document(drawing, title="t").encode("utf-8")))
    theirs = _geometry(ET.fromstring(renderSVG.drawToString(drawing).encode("utf-8")))
    assert len(ours) == len(theirs)
    for mine, ref in zip(ours, theirs, strict=True):
        # ours is written to 2 decimals, reportlab's to 6 significant digits
        assert mine == pytest.approx(ref, abs=0.011), name


def test_svg_escapes_text_and_tags_segments() -> None:
    drawing = Drawing(100, 50)
    drawing.add(String(10, 10, "<b>&</para> 日本語 🫀", fontName="Helvetica"))
    drawing.add(
        vector.TaggedGroup(
            vector.TaggedPath(
                points=[0, 0, 10, 0, 10, 10],
                operators=[0, 1, 1, 3],
                fillColor=colors.red,
                svg_id="segment-1",
                svg_class="segment",
                svg_title='a "quoted" <tip>',
            ),
            svg_class="segments",
        )
    )
    root = ET.fromstring(vector.svg_document(drawing, title="T & U").encode("utf-8"))
    assert root.find(f"{SVG_NS}title").text == "T & U"  # type: ignore[union-attr]
    (text,) = root.iter(f"{SVG_NS}text")
    assert text.text == "<b>&</para> 日本語 🫀"
    (path,) = root.iter(f"{SVG_NS}path")
    assert path.get("id") == "segment-1"
    assert path.find(f"{SVG_NS}title").text == 'a "quoted" <tip>'  # type: ignore[union-attr]
    (group,) = [g for g in root.iter(f"{SVG_NS}g") if g.get("class") == "segments"]
    assert list(group) == [path]


@pytest.mark.parametrize(
    "shape, problem",
    [
        (RLPath(points=[0, 0, 5, 5], operators=[0, 1], isClipPath=1), "clipping"),
        (RLPath(points=[0, 0, 5, 5], operators=[0, 1], autoclose="svg"), "auto-closing"),
        (String(0, 0, "1.5", textAnchor="numeric"), "text anchor"),
        (Rect(0, 0, 5, 5, fillOpacity=0.5), "fillOpacity"),
        (Line(0, 0, 5, 5, strokeOpacity=0.5), "strokeOpacity"),
    ],
    ids=["clip path", "autoclose", "numeric anchor", "fill opacity", "stroke opacity"],
)
def test_options_we_do_not_draw_are_refused(shape: object, problem: str) -> None:
    drawing = Drawing(10, 10)
    drawing.add(shape)
    with pytest.raises(ValueError, match=problem):
        vector.svg_document(drawing, title="t")
    with pytest.raises(ValueError, match=problem):
        vector.paint(Canvas(io.BytesIO()), drawing)


def test_unknown_shapes_are_refused_not_dropped() -> None:
    drawing = Drawing(50, 50)
    drawing.add(Group(Ellipse(10, 10, 5, 3)))
    with pytest.raises(TypeError, match="Ellipse"):
        vector.svg_document(drawing, title="t")
    with pytest.raises(TypeError, match="Ellipse"):
        vector.paint(Canvas(io.BytesIO()), drawing)


def _page(drawings: list[Drawing], painter: str) -> bytes:
    """One page holding every drawing, in rows, painted by ours or by reportlab's renderer."""
    width, gap = 620.0, 5.0
    row_height = max(d.height for d in drawings) + gap
    places: list[tuple[float, float]] = []
    x, row = gap, 0
    for drawing in drawings:
        if x > gap and x + drawing.width > width:
            x, row = gap, row + 1
        places.append((x, row))
        x += drawing.width + gap
    height = (row + 1) * row_height + gap
    buffer = io.BytesIO()
    canvas = Canvas(buffer, pagesize=(width, height), invariant=1)
    for drawing, (x, r) in zip(drawings, places, strict=True):
        y = height - (r + 1) * row_height
        if painter == "ours":
            vector.paint(canvas, drawing, x, y)
        else:
            renderPDF.draw(drawing, canvas, x, y)
    canvas.showPage()
    canvas.save()
    return buffer.getvalue()


def _pixels(pdf: bytes, tmp: Path, stem: str) -> bytes:
    (tmp / f"{stem}.pdf").write_bytes(pdf)
    subprocess.run(
        ["pdftoppm", "-r", "110", "-gray", "-singlefile", tmp / f"{stem}.pdf", tmp / stem],
        check=True,
    )
    return (tmp / f"{stem}.pgm").read_bytes()


@pytest.mark.skipif(shutil.which("pdftoppm") is None, reason="needs poppler-utils (pdftoppm)")
@pytest.mark.parametrize("group", ["DEMO-0002", "DEMO-0006", "curves", "features"])
def test_pdf_painting_matches_reportlabs_renderer(group: str, tmp_path: Path) -> None:
    drawings = [d for n, d in DRAWINGS if n.startswith(group)]
    assert drawings
    ours = _pixels(_page(drawings, "ours"), tmp_path, "ours")
    theirs = _pixels(_page(drawings, "reportlab"), tmp_path, "theirs")
    assert len(ours) == len(theirs)
    differing = sum(1 for a, b in zip(ours, theirs, strict=True) if abs(a - b) > 48)
    # identical in practice; a handful of anti-aliased edge pixels may round differently
    assert differing <= len(ours) // 10_000, differing


def test_pdf_painting_keeps_group_transforms_local() -> None:
    """A rotated group's transform must not leak into the shapes drawn after it."""
    drawing = Drawing(100, 100)
    inner = Group(RLPath(points=[0, 0, 5, 0, 5, 5], operators=[0, 1, 1, 3]))
    inner.rotate(90)
    drawing.add(inner)
    drawing.add(Circle(50, 50, 5, fillColor=colors.blue))
    buffer = io.BytesIO()
    canvas = Canvas(buffer)
    vector.paint(canvas, drawing, 0, 0)
    ops = canvas.getCurrentPageContent().splitlines()
    # one save/restore pair for the drawing and one for the rotated group
    assert ops.count("q") == ops.count("Q") == 2
    rotate, restore = ops.index("0 1 -1 0 0 0 cm"), ops.index("Q")
    # the circle (its curves start at x = 55) comes after the group's state is restored
    assert rotate < restore < next(i for i, op in enumerate(ops) if op.startswith("55 50 m"))
