"""HTML pages of the entry server, from jinja2 templates with autoescape always on.

One :class:`jinja2.Environment` (``StrictUndefined``, ``trim_blocks``, ``lstrip_blocks``) reads the
packaged ``templates/``. Data for the page script travels in ``<script type="application/json">``
blocks written with jinja2's ``tojson`` filter, which escapes ``<``, ``>``, ``&`` and quotes, so a
study field holding markup stays text.
"""

from __future__ import annotations

from functools import cache
from typing import Any

import jinja2

from reporting.render.scheme import PERFUSION_WORDS, WALL_MOTION_WORDS
from reporting.web.form import stage_titles

STAGE_TITLES = stage_titles(None)
"""Tab titles before a protocol is chosen; the page script renames them for the protocol."""


@cache
def environment() -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.PackageLoader("reporting.web", "templates"),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        autoescape=True,
    )


def entry_page(**context: Any) -> str:
    """The score-entry page."""
    template = environment().get_template("entry.html.j2")
    return template.render(
        stage_titles=STAGE_TITLES,
        wall_motion_words=WALL_MOTION_WORDS,
        perfusion_words=PERFUSION_WORDS,
        **context,
    )
