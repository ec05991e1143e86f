"""The lab's logo in the PDF letterhead: a PNG or SVG file named by the lab settings (``lab_logo``).

The settings loader has already checked the file's kind (:func:`reporting.settings.check_logo`);
here it is read again with the same size bound and decoded: a PNG through reportlab's image reader
(Pillow), its pixel size bounded first; an SVG through svglib into a reportlab drawing, with entity
resolution off and no outside resource (the check refuses them). The logo is scaled to fit its box,
keeping its proportions. A file that cannot be decoded is an :class:`InputError` located at it.
"""

from __future__ import annotations

import io
import logging
import struct
from pathlib import Path

from reportlab.platypus import Flowable, Image

from reporting.errors import InputError
from reporting.settings import LogoKind, check_logo, read_logo

log = logging.getLogger(__name__)

LOGO_MAX_PIXELS = 4096
"""Largest width or height (pixels) of a PNG logo, checked before it is decoded."""


def logo_flowable(path: str | Path, max_width: float, max_height: float) -> Flowable:
    """The logo at ``path`` as a flowable no larger than ``max_width`` × ``max_height`` points."""
    path = Path(path)
    data = read_logo(path)
    kind = check_logo(data, path)
    if kind is LogoKind.PNG:
        return _png(data, path, max_width, max_height)
    return _svg(data, path, max_width, max_height)


def _fit(width: float, height: float, max_width: float, max_height: float) -> float:
    if width <= 0 or height <= 0:
        raise ValueError("the image has no size")
    return min(max_width / width, max_height / height)


def _png(data: bytes, path: Path, max_width: float, max_height: float) -> Flowable:
    # IHDR is the first chunk: width and height are the big-endian words at bytes 16–23
    if len(data) < 24 or data[12:16] != b"IHDR":
        raise InputError(str(path), "the PNG logo has no image header")
    width, height = struct.unpack(">II", data[16:24])
    if max(width, height) > LOGO_MAX_PIXELS:
        raise InputError(
            str(path),
            f"the PNG logo is {width}×{height} pixels; a logo is at most {LOGO_MAX_PIXELS} a side",
        )
    try:
        from reportlab.lib.utils import ImageReader

        reader = ImageReader(io.BytesIO(data))
        pixel_width, pixel_height = reader.getSize()
        scale = _fit(pixel_width, pixel_height, max_width, max_height)
    except Exception as exc:  # Pillow's errors for damaged files vary
        raise InputError(str(path), f"cannot read the PNG logo: {exc}") from None
    return Image(
        io.BytesIO(data), width=pixel_width * scale, height=pixel_height * scale, hAlign="LEFT"
    )


def _svg(data: bytes, path: Path, max_width: float, max_height: float) -> Flowable:
    from svglib.svglib import svg2rlg

    # svglib logs and returns None for a document it cannot parse
    logging.getLogger("svglib.svglib").setLevel(logging.CRITICAL)
    try:
        drawing = svg2rlg(io.BytesIO(data), resolve_entities=False)
        if drawing is None:
            raise ValueError("not a readable SVG document")
        scale = _fit(drawing.width, drawing.height, max_width, max_height)
    except Exception as exc:
        raise InputError(str(path), f"cannot read the SVG logo: {exc}") from None
    drawing.scale(scale, scale)
    drawing.width, drawing.height = drawing.width * scale, drawing.height * scale
    drawing.hAlign = "LEFT"
    return drawing
