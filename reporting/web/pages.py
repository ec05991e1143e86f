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
    """The score-entry page of the folder mode (``context``: its folder, study and problems)."""
    template = environment().get_template("entry.html.j2")
    return template.render(
        stage_titles=STAGE_TITLES,
        wall_motion_words=WALL_MOTION_WORDS,
        perfusion_words=PERFUSION_WORDS,
        **editor_context(),
        **context,
    )


def editor_context() -> dict[str, Any]:
    """What the shared editor part (``_editor.html.j2``) needs, on either page."""
    from reporting.model import STAGE_ORDER, Protocol
    from reporting.segments import BUILT_IN_MAPS
    from reporting.web import form, shapes

    return {
        "geometry": shapes.page_geometry(),
        "protocols": [p.value for p in Protocol],
        "stages": [s.value for s in STAGE_ORDER],
        "form": form.page_form(),
        "territory_maps": list(BUILT_IN_MAPS),
    }


def lab_page() -> str:
    """The lab page of ``segreport serve --db``: sign-in, worklist, editor, signing, users.

    Nothing about a person or a study is in the page itself; the page script asks the API for
    everything after sign-in, so the page is the same for everyone and may be served publicly.
    """
    from reporting import __version__
    from reporting.store.signing import DEFAULT_MEANING
    from reporting.wording import CAUTIONS

    template = environment().get_template("lab.html.j2")
    return template.render(
        stage_titles=STAGE_TITLES,
        wall_motion_words=WALL_MOTION_WORDS,
        perfusion_words=PERFUSION_WORDS,
        cautions=list(CAUTIONS),
        version=__version__,
        signature_meaning=DEFAULT_MEANING,
        **editor_context(),
    )
