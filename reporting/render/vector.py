"""Our own output of reportlab drawings: SVG text and direct painting onto a PDF canvas.

The maps, legends and curve panels are built as reportlab ``Drawing`` trees of a few shape kinds
(groups with transforms, paths, polylines, lines, rectangles, circles and strings). reportlab's own
renderers handle every shape and option there is, at a cost: its SVG renderer builds a DOM and
serialises it, and its PDF renderer saves and restores the graphics state around every node. For the
small set of shapes we use, writing the SVG text and the canvas operators directly is several times
faster and gives cleaner SVG (a real ``<title>``, one flip of the y axis, ids and classes where we
ask for them). Any other shape kind raises ``TypeError`` and any option we do not draw (clipping
paths, auto-closing, separate opacities, numeric text anchors) raises ``ValueError``, so nothing is
ever silently dropped; the tests compare both outputs with reportlab's own renderers. As in
reportlab, a path is filled only when every subpath is closed.

:class:`TaggedPath` and :class:`TaggedGroup` carry an SVG ``id``, ``class`` and ``<title>``
(tooltip); the PDF ignores them.
"""

from __future__ import annotations

from collections.abc import Iterator
from html import escape
from typing import Any

from reportlab.graphics.shapes import (
    FILL_EVEN_ODD,
    FILL_NON_ZERO,
    Circle,
    Drawing,
    Group,
    Line,
    Path,
    PolyLine,
    Rect,
    String,
    _renderPath,
)
from reportlab.lib.attrmap import AttrMap, AttrMapValue
from reportlab.lib.colors import Color
from reportlab.lib.validators import isStringOrNone
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import Flowable

from reporting.render import shapes

__all__ = ["DrawingFlowable", "TaggedGroup", "TaggedPath", "paint", "svg_document"]

_TAGS = {
    "svg_id": AttrMapValue(isStringOrNone, desc="SVG id attribute"),
    "svg_class": AttrMapValue(isStringOrNone, desc="SVG class attribute"),
    "svg_title": AttrMapValue(isStringOrNone, desc="SVG <title> (tooltip) text"),
}
_IDENTITY = (1, 0, 0, 1, 0, 0)
_CAPS = ("butt", "round", "square")
_JOINS = ("miter", "round", "bevel")
_PATH_OPS = ("M", "L", "C", "Z")
_OP_POINTS = (2, 2, 6, 0)


class TaggedPath(shapes.Path):
    """A path that becomes an SVG element with an id, a class and a tooltip."""

    _attrMap = AttrMap(BASE=Path, **_TAGS)
    svg_id: str | None = None
    svg_class: str | None = None
    svg_title: str | None = None


class TaggedGroup(shapes.Group):
    """A group that becomes an SVG ``<g>`` with an id, a class and a tooltip."""

    _attrMap = AttrMap(BASE=Group, **_TAGS)
    svg_id: str | None = None
    svg_class: str | None = None
    svg_title: str | None = None

    def __init__(self, *elements: Any, **keywords: Any) -> None:
        super().__init__(*elements, **keywords)
        # Group.__init__ replaces the class map with a clone of Group's; keep the tags in it
        self._attrMap = AttrMap(BASE=self._attrMap, **_TAGS)


# --- what both outputs share ----------------------------------------------------------------------


def _refuse_unsupported(node: Any) -> None:
    """Raise for an option of ``node`` that neither output draws, rather than ignore it."""
    problems = []
    if isinstance(node, Path) and (node.isClipPath or node.autoclose):
        problems.append("clipping or auto-closing path")
    if isinstance(node, String) and node.textAnchor not in ("start", "middle", "end"):
        problems.append(f"text anchor {node.textAnchor!r}")
    if getattr(node, "fillOpacity", None) is not None:
        problems.append("fillOpacity (use a colour with alpha)")
    if getattr(node, "strokeOpacity", None) is not None:
        problems.append("strokeOpacity (use a colour with alpha)")
    if problems:
        raise ValueError(f"{type(node).__name__}: {', '.join(problems)} not supported")


def _fills(node: Any) -> bool:
    """Whether ``node`` is filled: a fill colour and, for a path, every subpath closed (reportlab's
    rule for paths without auto-closing)."""
    if not isinstance(node, Path | Rect | Circle) or node.fillColor is None:
        return False
    if isinstance(node, Path):
        return bool(node.operators.count(0) == node.operators.count(3))
    return True


def _dash(shape: Any) -> tuple[tuple[float, ...], float]:
    """The dash lengths and phase; reportlab accepts ``[on, off, …]`` or ``(phase, [on, off, …])``."""
    dash = shape.strokeDashArray
    if not dash:
        return (), 0.0
    if len(dash) == 2 and isinstance(dash[1], list | tuple):
        return tuple(dash[1]), float(dash[0])
    return tuple(dash), 0.0


# --- SVG ----------------------------------------------------------------------------------------


def _num(value: float, places: int = 2) -> str:
    text = f"{value:.{places}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text == "-0" else text


def _colour(color: Color | None) -> str:
    if color is None:
        return "none"
    r, g, b = (round(255 * c) for c in color.rgb())
    return f"#{r:02x}{g:02x}{b:02x}"


def _font(name: str) -> str:
    family = name.split("-")[0]
    out = f'font-family="{escape(family)}, sans-serif"'
    if "Bold" in name:
        out += ' font-weight="bold"'
    if "Oblique" in name or "Italic" in name:
        out += ' font-style="italic"'
    return out


def _paint_attrs(shape: Any) -> str:
    parts = []
    if not _fills(shape):
        parts.append('fill="none"')
    else:
        fill_color = shape.fillColor
        parts.append(f'fill="{_colour(fill_color)}"')
        if fill_color.alpha < 1:
            parts.append(f'fill-opacity="{_num(fill_color.alpha)}"')
        if isinstance(shape, Path):
            parts.append(
                f'fill-rule="{"nonzero" if shape.fillMode == FILL_NON_ZERO else "evenodd"}"'
            )
    stroke = shape.strokeColor
    if stroke is None or not shape.strokeWidth:
        parts.append('stroke="none"')
        return " ".join(parts)
    parts.append(f'stroke="{_colour(stroke)}" stroke-width="{_num(shape.strokeWidth)}"')
    if stroke.alpha < 1:
        parts.append(f'stroke-opacity="{_num(stroke.alpha)}"')
    if shape.strokeLineCap:
        parts.append(f'stroke-linecap="{_CAPS[shape.strokeLineCap]}"')
    if shape.strokeLineJoin:
        parts.append(f'stroke-linejoin="{_JOINS[shape.strokeLineJoin]}"')
    dash, phase = _dash(shape)
    if dash:
        parts.append(f'stroke-dasharray="{" ".join(_num(d) for d in dash)}"')
        if phase:
            parts.append(f'stroke-dashoffset="{_num(phase)}"')
    return " ".join(parts)


def _tags(shape: Any) -> tuple[str, str]:
    """The id/class attributes and the ``<title>`` element of a tagged shape."""
    attrs = ""
    if getattr(shape, "svg_id", None):
        attrs += f' id="{escape(shape.svg_id)}"'
    if getattr(shape, "svg_class", None):
        attrs += f' class="{escape(shape.svg_class)}"'
    title = getattr(shape, "svg_title", None)
    return attrs, f"<title>{escape(title)}</title>" if title else ""


def _path_data(path: Path) -> str:
    out: list[str] = []
    points = path.points
    i = 0
    for op in path.operators:
        n = _OP_POINTS[op]
        out.append(_PATH_OPS[op])
        out += [_num(v) for v in points[i : i + n]]
        i += n
    return " ".join(out)


def _svg_nodes(node: Any, indent: str) -> Iterator[str]:
    _refuse_unsupported(node)
    if isinstance(node, Group):
        attrs, title = _tags(node)
        if node.transform != _IDENTITY:
            # rotation coefficients need more places than coordinates
            attrs += f' transform="matrix({" ".join(_num(v, 6) for v in node.transform)})"'
        yield f"{indent}<g{attrs}>{title}"
        for child in node.contents:
            yield from _svg_nodes(child, indent + " ")
        yield f"{indent}</g>"
        return
    if isinstance(node, String):
        anchor = {"middle": ' text-anchor="middle"', "end": ' text-anchor="end"'}.get(
            node.textAnchor, ""
        )
        yield (
            f'{indent}<text transform="matrix(1 0 0 -1 {_num(node.x)} {_num(node.y)})" '
            f'{_font(node.fontName)} font-size="{_num(node.fontSize)}" '
            f'fill="{_colour(node.fillColor)}"{anchor}>{escape(node.text)}</text>'
        )
        return
    attrs, title = _tags(node)
    if isinstance(node, Path):
        tag, body = "path", f'd="{_path_data(node)}" {_paint_attrs(node)}'
    elif isinstance(node, PolyLine):
        points = " ".join(_num(v) for v in node.points)
        tag, body = "polyline", f'points="{points}" {_paint_attrs(node)}'
    elif isinstance(node, Line):
        ends = (
            f'x1="{_num(node.x1)}" y1="{_num(node.y1)}" x2="{_num(node.x2)}" y2="{_num(node.y2)}"'
        )
        tag, body = "line", f"{ends} {_paint_attrs(node)}"
    elif isinstance(node, Rect):
        box = (
            f'x="{_num(node.x)}" y="{_num(node.y)}" '
            f'width="{_num(node.width)}" height="{_num(node.height)}"'
        )
        if node.rx or node.ry:
            box += f' rx="{_num(node.rx or node.ry)}" ry="{_num(node.ry or node.rx)}"'
        tag, body = "rect", f"{box} {_paint_attrs(node)}"
    elif isinstance(node, Circle):
        centre = f'cx="{_num(node.cx)}" cy="{_num(node.cy)}" r="{_num(node.r)}"'
        tag, body = "circle", f"{centre} {_paint_attrs(node)}"
    else:
        raise TypeError(f"no SVG output for a {type(node).__name__} shape")
    yield f"{indent}<{tag}{attrs} {body}>{title}</{tag}>"


def svg_document(drawing: Drawing, *, title: str, description: str = "") -> str:
    """``drawing`` as a standalone SVG document with a ``<title>`` and a ``<desc>``."""
    width, height = drawing.width, drawing.height
    head = (
        '<?xml version="1.0" encoding="utf-8"?>\n'
        f'<svg xmlns="http://www.w3.org/2000/svg" version="1.1" width="{_num(width)}" '
        f'height="{_num(height)}" viewBox="0 0 {_num(width)} {_num(height)}" role="img">\n'
        f" <title>{escape(title)}</title>\n"
    )
    if description:
        head += f" <desc>{escape(description)}</desc>\n"
    # reportlab's y axis points up, SVG's down: one flip for the whole drawing
    lines = [head + f' <g transform="matrix(1 0 0 -1 0 {_num(height)})">']
    if drawing.transform != _IDENTITY:
        moved = Group(*drawing.contents)
        moved.transform = drawing.transform
        lines += _svg_nodes(moved, "  ")
    else:
        for child in drawing.contents:
            lines += _svg_nodes(child, "  ")
    lines.append(" </g>\n</svg>\n")
    return "\n".join(lines)


# --- PDF canvas ----------------------------------------------------------------------------------


_UNKNOWN: Any = object()


# pen slot, shape attribute, canvas setter
_STROKE_SETTINGS = (
    ("stroke", "strokeColor", "setStrokeColor"),
    ("width", "strokeWidth", "setLineWidth"),
    ("cap", "strokeLineCap", "setLineCap"),
    ("join", "strokeLineJoin", "setLineJoin"),
)


class _Pen:
    """The graphics state last set on the canvas, so unchanged settings are not written again.

    Everything starts unknown (the canvas may carry any state from what was drawn before).
    """

    __slots__ = ("cap", "dash", "fill", "font", "join", "stroke", "width")

    def __init__(self) -> None:
        self.fill: Color = _UNKNOWN
        self.stroke: Color = _UNKNOWN
        self.width: float = _UNKNOWN
        self.cap: int = _UNKNOWN
        self.join: int = _UNKNOWN
        self.dash: tuple[tuple[float, ...], float] = _UNKNOWN
        self.font: tuple[str, float] = _UNKNOWN

    def copy(self) -> _Pen:
        pen = _Pen()
        for name in self.__slots__:
            setattr(pen, name, getattr(self, name))
        return pen

    def fill_with(self, canvas: Canvas, color: Color) -> None:
        if color != self.fill:
            canvas.setFillColor(color)
            self.fill = color

    def stroke_with(self, canvas: Canvas, shape: Any) -> None:
        for slot, attribute, setter in _STROKE_SETTINGS:
            value = getattr(shape, attribute)
            if value != getattr(self, slot):
                getattr(canvas, setter)(value)
                setattr(self, slot, value)
        dash = _dash(shape)
        if dash != self.dash:
            canvas.setDash(list(dash[0]), dash[1])
            self.dash = dash


def _paint_node(canvas: Canvas, node: Any, pen: _Pen) -> None:
    _refuse_unsupported(node)
    if isinstance(node, Group):
        moved = node.transform != _IDENTITY
        inner = pen
        if moved:
            canvas.saveState()
            canvas.transform(*node.transform)
            inner = pen.copy()
        for child in node.contents:
            _paint_node(canvas, child, inner)
        if moved:
            canvas.restoreState()
        return
    if isinstance(node, String):
        if node.fillColor is None or not node.text:
            return
        pen.fill_with(canvas, node.fillColor)
        if (node.fontName, node.fontSize) != pen.font:
            canvas.setFont(node.fontName, node.fontSize)
            pen.font = (node.fontName, node.fontSize)
        draw = {"middle": canvas.drawCentredString, "end": canvas.drawRightString}.get(
            node.textAnchor, canvas.drawString
        )
        draw(node.x, node.y, node.text)
        return
    if not isinstance(node, Path | PolyLine | Line | Rect | Circle):
        raise TypeError(f"no PDF painting for a {type(node).__name__} shape")
    fill = node.fillColor if _fills(node) else None
    stroke = node.strokeColor is not None and bool(node.strokeWidth)
    if fill is not None:
        pen.fill_with(canvas, fill)
    if stroke:
        pen.stroke_with(canvas, node)
    if fill is None and not stroke:
        return
    if isinstance(node, Circle):
        canvas.circle(node.cx, node.cy, node.r, stroke=int(stroke), fill=int(fill is not None))
    elif isinstance(node, Rect):
        box = (node.x, node.y, node.width, node.height)
        if node.rx or node.ry:
            canvas.roundRect(
                *box, node.rx or node.ry, stroke=int(stroke), fill=int(fill is not None)
            )
        else:
            canvas.rect(*box, stroke=int(stroke), fill=int(fill is not None))
    elif isinstance(node, Line):
        canvas.line(node.x1, node.y1, node.x2, node.y2)
    else:
        outline = canvas.beginPath()
        points = node.points
        if isinstance(node, PolyLine):
            outline.moveTo(points[0], points[1])
            for i in range(2, len(points), 2):
                outline.lineTo(points[i], points[i + 1])
        else:
            # reportlab's own walk over a path's operators, as renderPDF uses it
            _renderPath(node, (outline.moveTo, outline.lineTo, outline.curveTo, outline.close))
        mode = node.fillMode if isinstance(node, Path) else FILL_EVEN_ODD
        canvas.drawPath(outline, stroke=int(stroke), fill=int(fill is not None), fillMode=mode)


def paint(canvas: Canvas, drawing: Drawing, x: float = 0, y: float = 0) -> None:
    """Paint ``drawing`` onto ``canvas`` with its lower-left corner at (x, y)."""
    canvas.saveState()
    canvas.translate(x, y)
    if drawing.transform != _IDENTITY:
        canvas.transform(*drawing.transform)
    pen = _Pen()
    for child in drawing.contents:
        _paint_node(canvas, child, pen)
    canvas.restoreState()


class DrawingFlowable(Flowable):  # type: ignore[misc]
    """A drawing placed in the PDF story, painted with :func:`paint`."""

    def __init__(self, drawing: Drawing) -> None:
        super().__init__()
        self.drawing = drawing
        self.width, self.height = drawing.width, drawing.height

    def wrap(self, available_width: float, available_height: float) -> tuple[float, float]:
        return self.width, self.height

    def draw(self) -> None:
        paint(self.canv, self.drawing)
