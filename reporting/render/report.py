"""Writing the whole report set of one study: record, SVG maps and PDF, all or nothing."""

from __future__ import annotations

import logging
from pathlib import Path

from reporting.export.record import record_json
from reporting.files import all_or_nothing, write_atomic
from reporting.render import diagram
from reporting.render.pdf import pdf_bytes
from reporting.results import Analysis

log = logging.getLogger(__name__)


def map_svgs(analysis: Analysis) -> dict[str, str]:
    """Every bull's-eye map of ``analysis`` as SVG text, by purpose (``wall_motion-peak``, …)."""
    return {
        spec.key: diagram.svg_text(diagram.bullseye(analysis, spec), analysis, spec)
        for spec in diagram.map_specs(analysis)
    }


def report_paths(analysis: Analysis, outdir: Path) -> list[Path]:
    """The files :func:`write_report` writes for ``analysis``, in writing order."""
    sid = analysis.study.id
    maps = [outdir / f"{sid}.{spec.key}.svg" for spec in diagram.map_specs(analysis)]
    return [outdir / f"{sid}.record.json", *maps, outdir / f"{sid}.pdf"]


def write_report(
    analysis: Analysis,
    outdir: Path,
    *,
    paper: str = "A4",
    templates_dir: Path | str | None = None,
) -> list[Path]:
    """Write the record, the SVG maps and the PDF of ``analysis`` into ``outdir``; return the paths.

    Everything is rendered in memory first, then written file by file through ``write_atomic``;
    if any step fails, the files this call created are removed again.
    """
    outdir = Path(outdir)
    paths = report_paths(analysis, outdir)
    contents: list[str | bytes] = [
        record_json(analysis),
        *map_svgs(analysis).values(),
        pdf_bytes(analysis, paper=paper, templates_dir=templates_dir),
    ]
    with all_or_nothing(paths):
        for path, data in zip(paths, contents, strict=True):
            write_atomic(path, data)
    log.debug("wrote %d report files for %s into %s", len(paths), analysis.study.id, outdir)
    return paths
