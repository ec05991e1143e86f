"""The reportlab shapes our drawings are built from, without per-attribute validation.

reportlab checks every attribute assignment of a shape against its attribute map while the
process-wide flag ``rl_config.shapeChecking`` is on (the default), which cost about a fifth of the
PDF's time. Rather than switch that flag off for every program that imports us, these subclasses
skip the check for our own shapes only: they are built by tested code (the SVG writer and the PDF
painter of :mod:`reporting.render.vector` refuse what they cannot draw), and any other reportlab
user in the process keeps its checks. They are ordinary subclasses, so ``isinstance`` against the
reportlab classes, reportlab's own renderers and ``Drawing.add`` all work unchanged.
"""

from __future__ import annotations

from reportlab.graphics import shapes

__all__ = ["Circle", "Drawing", "Group", "Line", "Path", "PolyLine", "Rect", "String"]


class _Unchecked:
    """Plain attribute assignment, ahead of reportlab's checking ``__setattr__`` in the MRO."""

    __slots__ = ()
    __setattr__ = object.__setattr__


class Circle(_Unchecked, shapes.Circle):  # type: ignore[misc]
    """A circle (reportlab's), built without attribute checks."""


class Drawing(_Unchecked, shapes.Drawing):  # type: ignore[misc]
    """A drawing (reportlab's), built without attribute checks."""


class Group(_Unchecked, shapes.Group):  # type: ignore[misc]
    """A group (reportlab's), built without attribute checks."""


class Line(_Unchecked, shapes.Line):  # type: ignore[misc]
    """A line (reportlab's), built without attribute checks."""


class Path(_Unchecked, shapes.Path):  # type: ignore[misc]
    """A path (reportlab's), built without attribute checks."""


class PolyLine(_Unchecked, shapes.PolyLine):  # type: ignore[misc]
    """A polyline (reportlab's), built without attribute checks."""


class Rect(_Unchecked, shapes.Rect):  # type: ignore[misc]
    """A rectangle (reportlab's), built without attribute checks."""


class String(_Unchecked, shapes.String):  # type: ignore[misc]
    """A text string (reportlab's), built without attribute checks."""
