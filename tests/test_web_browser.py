"""End to end in a real headless Chromium: enter a study by clicks and keys, watch WMSI, save, report.

The app runs under uvicorn on a free loopback port in a background thread; Playwright for Python
drives Debian's chromium (``/usr/bin/chromium``; CI installs it, and the test skips only when it
is missing). Nothing leaves 127.0.0.1.
"""

from __future__ import annotations

import io
import json
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
from browser_support import CHROMIUM, CHROMIUM_ARGS, needs_chromium, serving
from pypdf import PdfReader

from reporting.load import load_study
from reporting.model import Stage
from reporting.web import create_app

pytestmark = needs_chromium


@pytest.fixture
def server(tmp_path: Path) -> Iterator[tuple[str, Path]]:
    studies = tmp_path / "studies"
    with serving(create_app(studies), "the entry server") as base:
        yield base, studies


def _wait_for_file(path: Path, seconds: float = 8) -> None:
    deadline = time.monotonic() + seconds
    while not path.exists():
        if time.monotonic() > deadline:
            pytest.fail(f"{path.name} was not written")
        time.sleep(0.05)


def _drafts(studies: Path) -> dict[str, dict[str, Any]]:
    found = {}
    for path in (studies / ".drafts").glob("*.json"):
        try:
            found[path.stem] = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue  # being replaced right now
    return found


def _wait_for_draft(
    studies: Path, wanted: Callable[[dict[str, Any]], bool], seconds: float = 8
) -> str:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        for name, draft in _drafts(studies).items():
            if wanted(draft):
                return name
        time.sleep(0.05)
    pytest.fail("the draft was not written")


def _wait_until(condition: Callable[[], bool], seconds: float = 8) -> None:
    deadline = time.monotonic() + seconds
    while not condition():
        if time.monotonic() > deadline:
            pytest.fail("the drafts folder did not settle")
        time.sleep(0.05)


def test_enter_a_study_by_clicks_and_keys_then_save_and_report(
    server: tuple[str, Path], tmp_path: Path
) -> None:
    from playwright.sync_api import expect, sync_playwright

    base, studies = server
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            context = browser.new_context(viewport={"width": 1500, "height": 1000})
            context.set_default_timeout(8000)
            page = context.new_page()
            errors: list[str] = []
            page.on("pageerror", lambda exc: errors.append(str(exc)))
            page.goto(base + "/")

            # header fields
            page.fill("#f-study-id", "E2E-0001")
            page.select_option("#f-protocol", "dobutamine")
            page.fill("#f-patient-age_years", "60")
            page.fill("#f-study-date", "2026-10-14")

            # rest by the quick-entry line, typed key by key; the diagram follows
            page.locator("#q-rest-wall_motion").press_sequentially("11111111111111111")
            rest_map = page.locator('svg.bullseye[data-kind="wall_motion"][data-stage="rest"]')
            expect(rest_map.locator('.sector[data-segment="17"]')).to_have_attribute(
                "aria-label", "Segment 17, apex, wall motion: 1 normal"
            )
            page.fill("#f-stages-rest-heart_rate_bpm", "70")
            page.fill("#f-stages-rest-systolic_bp_mmhg", "120")
            # WMSI = mean of the scores (Lang RM et al., JASE 2015;28:1): all normal -> 1.00
            expect(page.locator('[data-wmsi="rest"]')).to_have_text("1.00 (17 scored)")

            # peak: copy rest, then change segments on the diagram
            page.click("#tab-peak")
            page.click(
                'button[data-action="copy-rest"][data-kind="wall_motion"][data-stage="peak"]'
            )
            peak_map = page.locator('svg.bullseye[data-kind="wall_motion"][data-stage="peak"]')
            peak_map.locator('.sector[data-segment="7"]').click()  # 1 -> 2 by click
            peak_map.locator('.sector[data-segment="8"]').click()
            peak_map.locator('.sector[data-segment="13"]').focus()
            page.keyboard.press("2")  # 13 = 2, focus moves on to 14
            page.keyboard.press("3")  # 14 = 3
            page.keyboard.press("End")  # to the apex
            page.keyboard.press("3")
            expect(page.locator("#q-peak-wall_motion")).to_have_value("111111 221111 2311 3")
            page.fill("#f-stages-peak-heart_rate_bpm", "150")
            page.fill("#f-stages-peak-systolic_bp_mmhg", "150")
            # (5 × 1 + 2 + 2 + 1 × 4 + 2 + 3 + 1 + 1 + 3) / 17 = 24 / 17
            expect(page.locator('[data-wmsi="peak"]')).to_have_text("1.41 (17 scored)")
            expect(page.locator("#tab-peak .tab-wmsi")).to_have_text("WMSI 1.41")
            expect(page.locator("#conclusion")).to_contain_text("LAD territory")
            expect(page.locator("#narrative")).to_contain_text(
                "Territory WMSI 1.00 at rest, 2.00 at peak"
            )

            # a located message beside the field, and gone once fixed
            page.fill("#f-stages-peak-diastolic_bp_mmhg", "low")
            expect(page.locator("#f-stages-peak-diastolic_bp_mmhg-error")).to_have_text(
                "'low' is not a number"
            )
            expect(page.locator("#f-stages-peak-diastolic_bp_mmhg")).to_have_attribute(
                "aria-invalid", "true"
            )
            page.fill("#f-stages-peak-diastolic_bp_mmhg", "80")
            expect(page.locator("#f-stages-peak-diastolic_bp_mmhg-error")).to_be_hidden()

            # nothing lost: the draft is in the browser and in the drafts folder, named by the tab
            draft = _wait_for_draft(studies, lambda d: d["study_id"] == "E2E-0001")
            assert draft == page.evaluate("sessionStorage.getItem('segreport:last')")
            assert draft.startswith(page.evaluate("sessionStorage.getItem('segreport:client')"))

            # save: a study file the command line reads
            page.click("#save-button")
            expect(page.locator("#status")).to_contain_text("Saved E2E-0001.yaml")
            study = load_study(studies / "E2E-0001.yaml")
            assert study.stages[Stage.PEAK].wall_motion == {
                n: s for n, s in enumerate([1] * 6 + [2, 2] + [1] * 4 + [2, 3, 1, 1, 3], start=1)
            }

            # report: the PDF is written, served, and carries the WMSI
            page.click("#report-button")
            link = page.locator("#report-link")
            expect(link).to_be_visible()
            href = link.get_attribute("href")
            assert href == "/reports/E2E-0001.pdf"
            pdf = page.request.get(base + href)
            assert pdf.ok and pdf.headers["content-type"] == "application/pdf"
            text = "".join(p.extract_text() for p in PdfReader(io.BytesIO(pdf.body())).pages)
            assert "WMSI 1.41 (17 scored)" in text
            assert (studies / "reports" / "E2E-0001.pdf").is_file()

            # reopening the saved file brings the scores back onto the diagram
            page.goto(base + "/?study=E2E-0001")
            page.click("#tab-peak")
            expect(page.locator("#q-peak-wall_motion")).to_have_value("111111 221111 2311 3")
            expect(
                page.locator(
                    'svg.bullseye[data-kind="wall_motion"][data-stage="peak"] .sector[data-segment="14"]'
                )
            ).to_have_attribute("aria-label", "Segment 14, apical septal, wall motion: 3 akinetic")
            page.screenshot(path=str(tmp_path / "entry.png"), full_page=True)
            assert errors == []
        finally:
            browser.close()


def test_two_tabs_the_second_save_shows_the_conflict_and_nothing_is_lost(
    server: tuple[str, Path],
) -> None:
    """Two tabs on one study: the later save is refused (412), the page says what changed and
    offers a reload or a copy; each tab's draft is its own, and no one's entries are lost."""
    from playwright.sync_api import expect, sync_playwright

    base, studies = server
    studies.joinpath("T-0001.yaml").write_text(
        "schema_version: 1\nstudy: {id: T-0001, date: 2026-10-14}\nprotocol: dobutamine\n"
        "stages:\n  rest: {wall_motion: 111111 111111 1111 1}\n"
        "  peak: {wall_motion: 111111 221111 2311 3}\n",
        encoding="utf-8",
    )
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            # one browser context = one browser: shared localStorage, a sessionStorage per tab
            context = browser.new_context(viewport={"width": 1500, "height": 1000})
            context.set_default_timeout(8000)
            errors: list[str] = []
            tab1, tab2 = context.new_page(), context.new_page()
            for tab in (tab1, tab2):
                tab.on("pageerror", lambda exc: errors.append(str(exc)))
                tab.goto(base + "/?study=T-0001")
                expect(tab.locator("#status")).to_contain_text("Opened T-0001.yaml")
            client1 = tab1.evaluate("sessionStorage.getItem('segreport:client')")
            client2 = tab2.evaluate("sessionStorage.getItem('segreport:client')")
            assert client1 != client2

            # tab 2 types first; its draft is autosaved under its own name
            tab2.fill("#f-comments", "Second reader: apex looks akinetic")
            draft2 = _wait_for_draft(studies, lambda d: d["client"] == client2)

            # tab 1 edits and saves: accepted, and only tab 1's own draft is removed
            tab1.fill("#f-indication", "Chest pain on exertion")
            _wait_for_draft(studies, lambda d: d["client"] == client1)
            tab1.click("#save-button")
            expect(tab1.locator("#status")).to_contain_text("Saved T-0001.yaml")
            saved_by_1 = studies.joinpath("T-0001.yaml").read_bytes()
            assert b"Chest pain on exertion" in saved_by_1
            _wait_until(lambda: set(_drafts(studies)) == {draft2})  # removal follows the save

            # tab 2 saves the version it opened: refused, with what changed, nothing written
            tab2.click("#save-button")
            conflict = tab2.locator("#conflict")
            expect(conflict).to_be_visible()
            expect(tab2.locator("#conflict-title")).to_have_text(
                "Not saved: T-0001 changed since you opened it"
            )
            expect(tab2.locator("#conflict-changes")).to_contain_text(
                "indication: (empty) → “Chest pain on exertion”"
            )
            assert studies.joinpath("T-0001.yaml").read_bytes() == saved_by_1
            expect(tab2.locator("#f-comments")).to_have_value("Second reader: apex looks akinetic")
            assert "apex looks akinetic" in json.dumps(_drafts(studies)[draft2])

            # save as a copy: both versions are now on disk, each whole
            expect(tab2.locator("#conflict-copy-id")).to_have_value("T-0001-copy")
            tab2.click("#conflict-copy")
            expect(tab2.locator("#status")).to_contain_text(
                "Saved your version as T-0001-copy.yaml"
            )
            expect(conflict).to_be_hidden()
            copy = load_study(studies / "T-0001-copy.yaml")
            assert copy.comments == "Second reader: apex looks akinetic"
            assert copy.indication is None
            assert load_study(studies / "T-0001.yaml").indication == "Chest pain on exertion"
            assert studies.joinpath("T-0001.yaml").read_bytes() == saved_by_1
            _wait_until(lambda: _drafts(studies) == {})

            # tab 1 saves again on top of its own save (its version moved on with the save)
            tab1.fill("#f-indication", "Chest pain on exertion, 3 months")
            tab1.click("#save-button")
            expect(tab1.locator("#status")).to_contain_text("Saved T-0001.yaml")
            assert load_study(studies / "T-0001.yaml").indication == (
                "Chest pain on exertion, 3 months"
            )

            # a reload offered after a conflict brings the stored version, keeping the edits' draft
            tab2.goto(base + "/?study=T-0001")
            tab1.fill("#f-indication", "changed again in tab 1")
            tab1.click("#save-button")
            expect(tab1.locator("#status")).to_contain_text("Saved T-0001.yaml")
            tab2.fill("#f-comments", "tab 2 once more")
            tab2.click("#save-button")
            expect(tab2.locator("#conflict")).to_be_visible()
            tab2.click("#conflict-reload")
            expect(tab2.locator("#f-indication")).to_have_value("changed again in tab 1")
            expect(tab2.locator("#status")).to_contain_text("your edits stay in the draft")
            kept = _wait_for_draft(studies, lambda d: d["client"] == client2)
            assert _drafts(studies)[kept]["form"]["study"]["comments"] == "tab 2 once more"
            assert errors == []
        finally:
            browser.close()


def _reader_study() -> dict[str, Any]:
    """Dobutamine, rest normal, peak with LAD ischaemia (7, 8, 13, 14, apex)."""
    return {
        "schema_version": 1,
        "study": {"id": "READ-0001", "date": "2026-10-14"},
        "patient": {"age_years": 60, "sex": "female"},
        "protocol": "dobutamine",
        "stages": {
            "rest": {"heart_rate_bpm": 70, "systolic_bp_mmhg": 120, "wall_motion": "1" * 17},
            "peak": {
                "heart_rate_bpm": 150,
                "systolic_bp_mmhg": 150,
                "wall_motion": "111111 221111 2311 3",
            },
        },
    }


def _words(text: str) -> str:
    return " ".join(text.split())


def test_reader_edits_the_impression_inserts_phrases_saves_and_sees_it_go_stale(
    server: tuple[str, Path], tmp_path: Path
) -> None:
    import yaml
    from playwright.sync_api import expect, sync_playwright

    from reporting.analysis import analyze
    from reporting.impression import findings_sha256

    base, studies = server
    studies.mkdir(parents=True, exist_ok=True)
    (studies / "READ-0001.yaml").write_text(yaml.safe_dump(_reader_study()), "utf-8")
    own_words = "Reader's own words: ischaemia of the anterior wall and apex."
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            context = browser.new_context(viewport={"width": 1500, "height": 1100})
            context.set_default_timeout(8000)
            page = context.new_page()
            errors: list[str] = []
            page.on("pageerror", lambda exc: errors.append(str(exc)))
            page.goto(base + "/?study=READ-0001")
            state = page.locator("#impression-state")
            expect(state).to_have_attribute("data-status", "none")
            expect(page.locator("#computed-impression")).to_contain_text("LAD territory")

            # accept the computed draft, then replace it with the reader's words
            page.click("#accept-computed")
            computed = page.locator("#computed-impression").text_content() or ""
            expect(page.locator("#f-impression")).to_have_value(computed)
            expect(state).to_have_attribute("data-status", "edited")
            page.fill("#f-impression", own_words)

            # a phrase by its short code (its {territory} slot filled from the analysis) ...
            page.locator("#f-recommendations").press_sequentially(".rec-angio ")
            angio = "Coronary angiography is suggested in view of ischaemia in the LAD territory."
            expect(page.locator("#f-recommendations")).to_have_value(angio + " ")
            # ... and one by a click in the phrase list
            page.click("#phrase-block summary")
            page.click('button.phrase[data-code=".rec-medical"]')
            medical = "Continue medical therapy and risk-factor management; review in clinic."
            expect(page.locator("#f-recommendations")).to_have_value(f"{angio} {medical}")

            # saving confirms the words against the findings computed now (the server's hash)
            page.click("#save-button")
            expect(page.locator("#status")).to_contain_text("Saved READ-0001.yaml")
            expect(state).to_have_attribute("data-status", "current")
            from reporting.load import load_study

            saved = load_study(studies / "READ-0001.yaml")
            assert saved.impression == own_words
            assert saved.recommendations == f"{angio} {medical}"
            assert saved.impression_basis_sha256 == findings_sha256(analyze(saved))

            # the PDF prints the reader's words
            page.click("#report-button")
            expect(page.locator("#report-link")).to_be_visible()
            pdf = page.request.get(base + "/reports/READ-0001.pdf")
            assert pdf.ok
            text = _words(
                "".join(p.extract_text() for p in PdfReader(io.BytesIO(pdf.body())).pages)
            )
            assert own_words in text
            assert angio in text and medical in text

            # a score changed afterwards: written against earlier findings until confirmed again
            page.click("#tab-peak")
            page.locator(
                'svg.bullseye[data-kind="wall_motion"][data-stage="peak"] .sector[data-segment="4"]'
            ).click()  # 1 -> 2: the inferior wall too
            expect(state).to_have_attribute("data-status", "stale")
            expect(state).to_contain_text("Written against earlier findings")
            page.locator("#impression-block").screenshot(path=str(tmp_path / "stale.png"))
            page.click("#confirm-impression")
            expect(state).to_have_attribute("data-status", "current")
            page.screenshot(path=str(tmp_path / "impression.png"), full_page=True)
            assert errors == []
        finally:
            browser.close()


def test_the_protocol_chooses_the_stages_and_fields_shown(server: tuple[str, Path]) -> None:
    from playwright.sync_api import expect, sync_playwright

    base, _ = server
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1500, "height": 1000})
            page.set_default_timeout(8000)
            page.goto(base + "/")
            page.select_option("#f-protocol", "treadmill")
            expect(page.locator("#tab-low_dose .tab-name")).to_have_text("Low workload")
            expect(page.locator("#tab-peak .tab-name")).to_have_text("Peak exercise")
            expect(page.locator("#f-stages-rest-atropine_mg")).to_be_hidden()
            expect(page.locator("#f-stages-rest-dose_ug_kg_min")).to_be_hidden()
            expect(page.locator("#f-exercise-hr_recovery_1min_bpm")).to_be_visible()
            expect(page.locator("#vasodilator-fields")).to_be_hidden()

            page.select_option("#f-protocol", "dobutamine")
            expect(page.locator("#tab-low_dose .tab-name")).to_have_text("Low dose")
            expect(page.locator("#f-stages-rest-atropine_mg")).to_be_visible()
            expect(page.locator("#exercise-fields")).to_be_hidden()

            page.select_option("#f-protocol", "vasodilator")
            expect(page.locator("#tab-low_dose")).to_be_hidden()
            page.select_option("#f-vasodilator-agent", "regadenoson")
            expect(page.locator("#f-vasodilator-dose_mg")).to_be_visible()
            expect(page.locator("#f-vasodilator-dose_ug_kg_min")).to_be_hidden()
            # the server's located refusal shows beside the order field
            page.fill("#f-order-accession_number", "A" * 17)
            expect(page.locator("#f-order-accession_number-error")).to_contain_text(
                "is 17 characters"
            )
        finally:
            browser.close()
