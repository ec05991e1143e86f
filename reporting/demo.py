"""The bundled demo: invented studies from an invented clinic, and what segreport makes of them.

The studies live in ``data/demo``; :func:`write_demo` copies each into a folder and writes its
outputs beside it, so a newcomer sees the whole job without preparing any input.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from reporting.analysis import analyze_file
from reporting.export.record import record_json
from reporting.files import write_atomic
from reporting.load import load_study


def demo_study_names() -> list[str]:
    """File names of the bundled demo studies, in order."""
    folder = resources.files("reporting.data").joinpath("demo")
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".yaml"))


def demo_study_text(name: str) -> str:
    """The text of one bundled demo study."""
    return (
        resources.files("reporting.data")
        .joinpath("demo")
        .joinpath(name)
        .read_text(encoding="utf-8")
    )


def write_demo(outdir: Path, *, reports: bool = True) -> list[Path]:
    """Write every demo study (with its curve files) and its outputs into ``outdir``.

    With ``reports`` (the default) each study gets its record, bull's-eye SVG maps and PDF; without,
    only its record.
    """
    folder = resources.files("reporting.data").joinpath("demo")
    written: list[Path] = []
    for name in demo_study_names():
        study_path = outdir / name
        write_atomic(study_path, demo_study_text(name))
        written.append(study_path)
        curves = load_study(study_path).perfusion_curves
        if curves is not None:  # the curve file travels beside its study
            write_atomic(outdir / curves, folder.joinpath(curves).read_bytes())
            written.append(outdir / curves)
        analysis = analyze_file(study_path)
        if reports:
            from reporting.render import (
                write_report,
            )  # reportlab loads only when reports are wanted

            written += write_report(analysis, outdir)
        else:
            record_path = outdir / f"{analysis.study.id}.record.json"
            write_atomic(record_path, record_json(analysis))
            written.append(record_path)
    return written
