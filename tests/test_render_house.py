"""House rules of the render side (#13): one module per job, one paragraph-style module for every
PDF, and no process-wide reportlab setting changed by importing us."""

from __future__ import annotations

import importlib.util
import re
import subprocess
import sys
from pathlib import Path

import reporting

PACKAGE = Path(reporting.__file__).resolve().parent


def test_importing_the_renderers_leaves_reportlabs_settings_alone() -> None:
    code = (
        "import reportlab.rl_config as c\n"
        "before = {k: getattr(c, k) for k in dir(c) if not k.startswith('_')"
        " and isinstance(getattr(c, k), (int, float, str, bool))}\n"
        "import reporting.render, reporting.render.pdf, reporting.qa.pdf, reporting.render.letterhead\n"
        "after = {k: getattr(c, k) for k in before}\n"
        "print(sorted(k for k in before if before[k] != after[k]))\n"
    )
    changed = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=PACKAGE.parent
    ).stdout.strip()
    assert changed == "[]"


def test_no_module_assigns_an_rl_config_flag() -> None:
    assignment = re.compile(r"rl_config\.\w+\s*=[^=]")
    offenders = [
        str(path.relative_to(PACKAGE))
        for path in PACKAGE.rglob("*.py")
        if assignment.search(path.read_text(encoding="utf-8"))
    ]
    assert offenders == []


def test_palettes_fonts_and_text_cleaning_have_their_own_modules() -> None:
    assert importlib.util.find_spec("reporting.render.style") is None
    for name in ("palette", "fonts", "safe_text", "paragraph_styles"):
        assert importlib.util.find_spec(f"reporting.render.{name}") is not None


def test_one_paragraph_style_module_serves_the_report_and_the_quality_pdfs() -> None:
    from reporting.qa.pdf import agreement, document
    from reporting.render import paragraph_styles
    from reporting.render.pdf import styles

    shared = paragraph_styles.paragraph_styles
    assert styles.paragraph_styles is shared
    assert document.paragraph_styles is shared
    assert agreement.paragraph_styles is shared
    # no other module builds its own set of paragraph styles
    builders = [
        str(path.relative_to(PACKAGE))
        for path in PACKAGE.rglob("*.py")
        if "def paragraph_styles(" in path.read_text(encoding="utf-8")
    ]
    assert builders == ["render/paragraph_styles.py"]
