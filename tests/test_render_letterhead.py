"""The lab letterhead (#13): logo (PNG or SVG) and address from the lab settings."""

from __future__ import annotations

import io
from pathlib import Path

import pytest
from click.testing import CliRunner
from PIL import Image as PILImage
from pypdf import PdfReader

from reporting.analysis import analyze_file
from reporting.cli import main
from reporting.demo import demo_study_text
from reporting.errors import InputError
from reporting.render import pdf_bytes
from reporting.settings import LOGO_MAX_BYTES, load_settings

ADDRESS = "12 Quarry Lane, Larkspur Valley"  # invented, like every demo detail
SVG_LOGO = (
    '<svg xmlns="http://www.w3.org/2000/svg" width="120" height="40" viewBox="0 0 120 40">'
    '<rect x="0" y="0" width="40" height="40" fill="#336699"/></svg>'
)


def _png(size: tuple[int, int] = (60, 20)) -> bytes:
    out = io.BytesIO()
    PILImage.new("RGB", size, (200, 40, 40)).save(out, format="PNG")
    return out.getvalue()


def _lab(tmp_path: Path, logo_name: str, logo: bytes) -> tuple[Path, Path]:
    """A study and a settings file in a folder, the logo in a subfolder (relative path)."""
    (tmp_path / "art").mkdir()
    (tmp_path / "art" / logo_name).write_bytes(logo)
    settings = tmp_path / "lab.yaml"
    settings.write_text(f"lab_logo: art/{logo_name}\nlab_address: {ADDRESS}\n", encoding="utf-8")
    study = tmp_path / "DEMO-0001.yaml"
    study.write_text(demo_study_text("DEMO-0001.yaml"), encoding="utf-8")
    return study, settings


def _first_page(pdf: bytes):  # type: ignore[no-untyped-def]
    return PdfReader(io.BytesIO(pdf)).pages[0]


def _image_xobjects(page) -> list[str]:  # type: ignore[no-untyped-def]
    resources = page["/Resources"]
    xobjects = resources.get("/XObject", {}) if resources else {}
    return [n for n, x in xobjects.items() if x.get_object()["/Subtype"] == "/Image"]


def test_png_logo_and_address_on_page_one(tmp_path: Path) -> None:
    study, settings = _lab(tmp_path, "logo.png", _png())
    analysis = analyze_file(study, settings_path=settings)
    assert analysis.study.lab_logo == str((tmp_path / "art" / "logo.png").resolve())
    page = _first_page(pdf_bytes(analysis))
    assert len(_image_xobjects(page)) == 1
    assert ADDRESS in page.extract_text()


def test_no_logo_no_image(tmp_path: Path) -> None:
    study, _ = _lab(tmp_path, "logo.png", _png())
    assert _image_xobjects(_first_page(pdf_bytes(analyze_file(study)))) == []


def test_svg_logo_is_drawn_as_vector_shapes(tmp_path: Path) -> None:
    study, settings = _lab(tmp_path, "logo.svg", SVG_LOGO.encode())
    page = _first_page(pdf_bytes(analyze_file(study, settings_path=settings)))
    content = page.get_contents().get_data().decode("latin-1")
    # the logo's fill, #336699 = (0.2, 0.4, 0.6), is painted (reportlab writes "r g b rg")
    assert ".2 .4 .6 rg" in content or "0.2 0.4 0.6 rg" in content
    assert _image_xobjects(page) == []


@pytest.mark.parametrize(
    ("name", "data", "problem"),
    [
        # a text file is neither a PNG nor an SVG
        ("logo.png", b"just some words", "a lab logo is a PNG or SVG image"),
        # an SVG with a document type could define entities (billion laughs, outside files)
        (
            "logo.svg",
            b'<?xml version="1.0"?><!DOCTYPE svg [<!ENTITY a "x">]><svg xmlns="http://www.w3.org/2000/svg"/>',
            "a logo must be self-contained",
        ),
        # an SVG that pulls an image from outside would read other files into the report
        (
            "logo.svg",
            b'<svg xmlns="http://www.w3.org/2000/svg"><image href="file:///etc/passwd"/></svg>',
            "a logo must be self-contained",
        ),
        # larger than any letterhead logo needs to be
        ("logo.png", b"\x89PNG\r\n\x1a\n" + b"0" * LOGO_MAX_BYTES, "a logo image is at most"),
    ],
    ids=["not-an-image", "svg-doctype", "svg-outside-file", "too-large"],
)
def test_a_bad_logo_is_refused_where_it_is(
    tmp_path: Path, name: str, data: bytes, problem: str
) -> None:
    _, settings = _lab(tmp_path, name, data)
    with pytest.raises(InputError) as caught:
        load_settings(settings)
    assert str(tmp_path / "art" / name) in caught.value.location
    assert problem in caught.value.problem


def test_a_missing_logo_is_refused_at_the_settings(tmp_path: Path) -> None:
    settings = tmp_path / "lab.yaml"
    settings.write_text("lab_logo: nowhere.png\n", encoding="utf-8")
    with pytest.raises(InputError) as caught:
        load_settings(settings)
    assert "nowhere.png" in caught.value.location


def test_a_damaged_png_is_a_located_error_on_the_command_line(tmp_path: Path) -> None:
    # a PNG signature and header, then no image data: Pillow cannot decode it
    damaged = _png()[:40]
    study, settings = _lab(tmp_path, "logo.png", damaged)
    out = tmp_path / "out"
    result = CliRunner().invoke(
        main, ["report", str(study), "--settings", str(settings), "-o", str(out)]
    )
    assert result.exit_code == 1
    assert f"Error: {(tmp_path / 'art' / 'logo.png').resolve()}: cannot read the PNG logo" in (
        result.output
    )
    assert not list(out.glob("*.pdf"))  # no partial output


def test_a_huge_png_is_refused_before_it_is_decoded(tmp_path: Path) -> None:
    # a decompression bomb: small file, enormous pixel size in its header
    study, settings = _lab(tmp_path, "logo.png", _png((5000, 1)))
    with pytest.raises(InputError, match="at most 4096 a side"):
        pdf_bytes(analyze_file(study, settings_path=settings))
