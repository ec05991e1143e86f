"""The lab page (`segreport serve --db`) end to end in real headless Chromium, on a SQLite store.

Two browser contexts are two workstations with their own session cookies: two readers open one
study, the first saves, the second's save is refused with the field-by-field conflict view, and
"Re-apply mine on top" saves a version that holds both edits (read back from the store). A reader
signs in, signs with the password dialog (the signed PDF opens), amends with a reason and reads
the history and audit view; a sonographer's save reaches the reader's worklist marked "awaiting
reader"; an idle page falls back to the sign-in form. Screens are saved as PNG files for a look.
The server and browser are started as in tests/test_web_browser.py; nothing leaves 127.0.0.1.
"""

from __future__ import annotations

import io
import json
import re
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from browser_support import chromium, needs_chromium, serving
from pypdf import PdfReader
from store_support import PASSWORD, cheap_argon2, study_data, write_study

from reporting.settings import default_settings
from reporting.store import history, service, signing, users, versions
from reporting.store.canonical import Origin
from reporting.store.engine import Database
from reporting.store.users import Role

__all__ = ["cheap_argon2"]  # fixture used by name

CLI = Origin.CLI
pytestmark = needs_chromium


@dataclass
class Lab:
    base: str
    db: Database


def _add_user(db: Database, name: str, full_name: str, roles: tuple[Role, ...]) -> None:
    """A user with a password of their own (not a temporary one to change at first sign-in)."""
    with db.write() as session:
        users.create(
            session,
            name,
            full_name=full_name,
            roles=roles,
            password=PASSWORD,
            temporary=False,
            actor="anna",
            origin=CLI,
        )


@pytest.fixture
def lab(tmp_path: Path) -> Iterator[Lab]:
    from reporting.web.lab.app import create_lab_app

    db = service.init_store(
        str(tmp_path / "store.db"),
        "anna",
        full_name="Dr Anna Example",
        password=PASSWORD,
        origin=CLI,
    )
    _add_user(db, "ruth", "Dr Ruth Example", (Role.READER,))
    _add_user(db, "sam", "Sam Example", (Role.SONOGRAPHER,))
    anna = users.authenticate(db, "anna", PASSWORD, origin=CLI)
    prior = study_data("DEMO-0001")
    prior["study"]["id"] = "DEMO-0001-P"
    prior["study"]["date"] = "2025-10-14"
    paths = [
        write_study(tmp_path / "in", study_data("DEMO-0001")),
        write_study(tmp_path / "in", study_data("DEMO-0002")),
        write_study(tmp_path / "in", prior),
    ]
    versions.import_files(db, paths, anna, origin=CLI)
    app = create_lab_app(
        db, settings=default_settings(), allowed_hosts=("127.0.0.1",), secure_cookies=False
    )
    with serving(app, "the lab server") as base:
        yield Lab(base, db)
    db.dispose()


@pytest.fixture
def browser() -> Iterator[Any]:
    with chromium() as launched:
        yield launched


def _page(browser: Any, errors: list[str]) -> Any:
    """A new browser context (its own cookies: another workstation) with one page."""
    context = browser.new_context(viewport={"width": 1500, "height": 1000})
    context.set_default_timeout(10000)
    page = context.new_page()
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    return page


def _sign_in(page: Any, base: str, user: str, password: str = PASSWORD) -> None:
    from playwright.sync_api import expect

    page.goto(base + "/")
    page.fill("#signin-user", user)
    page.fill("#signin-password", password)
    page.click("#signin-button")
    expect(page.locator("#app")).to_be_visible()
    expect(page.locator("#who-roles")).to_contain_text(user)


def _open(page: Any, study_id: str) -> None:
    from playwright.sync_api import expect

    page.locator(f'#worklist-table tbody tr[data-study="{study_id}"] th a').click()
    expect(page.locator("#study-title")).to_have_text(f"Study {study_id}")
    expect(page.locator("#analysis-state")).to_contain_text("Up to date")


def _shot(page: Any, folder: Path, name: str) -> None:
    """A PNG of the screen to look at (pytest's temporary folder, kept for the last runs)."""
    page.screenshot(path=str(folder / f"{name}.png"))


def _latest_study(db: Database, study_id: str) -> tuple[int, dict[str, Any]]:
    """The latest version's number and study, read from the store (not through the page)."""
    from reporting.store import content

    with db.read() as session:
        _, row = versions.get_version(session, study_id, None)
        stored = content.parse(row.content)
        number = row.version
    return number, json.loads(stored.study.model_dump_json())


def test_two_readers_one_study_the_second_save_shows_the_conflict_and_nothing_is_lost(
    lab: Lab, browser: Any, tmp_path: Path
) -> None:
    from playwright.sync_api import expect

    errors: list[str] = []
    first, second = _page(browser, errors), _page(browser, errors)
    _sign_in(first, lab.base, "anna")
    _sign_in(second, lab.base, "ruth")
    _shot(second, tmp_path, "worklist")
    for page in (first, second):
        _open(page, "DEMO-0001")
    start, _ = _latest_study(lab.db, "DEMO-0001")

    # ruth types first (nothing saved yet), anna edits another field and saves: accepted
    second.fill("#f-comments", "Second reader: apex hypokinetic at peak")
    first.fill("#f-indication", "Chest pain on exertion, 3 months")
    first.click("#save-button")
    expect(first.locator("#status")).to_contain_text("Saved DEMO-0001 as version")
    after_first, saved = _latest_study(lab.db, "DEMO-0001")
    assert after_first == start + 1
    assert saved["indication"] == "Chest pain on exertion, 3 months"

    # ruth saves the version she opened: refused, with anna's change field by field
    second.click("#save-button")
    conflict = second.locator("#lab-conflict")
    expect(conflict).to_be_visible()
    expect(second.locator("#lab-conflict-title")).to_contain_text("anna saved DEMO-0001")
    indication = second.locator('#lab-conflict-table tr[data-field="indication"]')
    expect(indication).to_contain_text("Chest pain on exertion, 3 months")
    comments = second.locator('#lab-conflict-table tr[data-field="comments"]')
    expect(comments).to_contain_text("Second reader: apex hypokinetic at peak")
    _shot(second, tmp_path, "conflict")
    assert _latest_study(lab.db, "DEMO-0001")[0] == after_first  # nothing written
    expect(second.locator("#f-comments")).to_have_value("Second reader: apex hypokinetic at peak")

    # re-apply mine on top: saved on top of anna's version, both edits kept
    second.click("#conflict-reapply")
    expect(second.locator("#status")).to_contain_text("your changes on top")
    expect(conflict).to_be_hidden()
    final, merged = _latest_study(lab.db, "DEMO-0001")
    assert final == after_first + 1
    assert merged["indication"] == "Chest pain on exertion, 3 months"
    assert merged["comments"] == "Second reader: apex hypokinetic at peak"
    expect(second.locator("#f-indication")).to_have_value("Chest pain on exertion, 3 months")
    trail = history.history(lab.db, "DEMO-0001")["versions"]
    assert [v["author"] for v in trail[-2:]] == ["anna", "ruth"]

    # anna's next save is stale in turn: "Reload theirs" shows ruth's merged version
    first.fill("#f-indication", "changed again")
    first.click("#save-button")
    expect(first.locator("#lab-conflict")).to_be_visible()
    first.click("#conflict-reload")
    expect(first.locator("#f-comments")).to_have_value("Second reader: apex hypokinetic at peak")
    expect(first.locator("#f-indication")).to_have_value("Chest pain on exertion, 3 months")
    assert _latest_study(lab.db, "DEMO-0001")[0] == final
    assert errors == []


def test_sign_in_sign_amend_and_read_the_history(lab: Lab, browser: Any, tmp_path: Path) -> None:
    from playwright.sync_api import expect

    errors: list[str] = []
    page = _page(browser, errors)

    # a wrong password: the same answer as an unknown user, and still the sign-in form
    page.goto(lab.base + "/")
    _shot(page, tmp_path, "sign-in")
    page.fill("#signin-user", "anna")
    page.fill("#signin-password", "not the password")
    page.click("#signin-button")
    message = page.locator("#signin-message")
    expect(message).to_be_visible()
    wrong = message.text_content()
    page.fill("#signin-user", "nobody-here")
    page.fill("#signin-password", "not the password")
    page.click("#signin-button")
    expect(message).to_have_text(wrong or "")
    expect(page.locator("#app")).to_be_hidden()

    _sign_in(page, lab.base, "anna")
    _open(page, "DEMO-0002")
    expect(page.locator("#sign-button")).to_be_visible()
    _shot(page, tmp_path, "editor")

    # sign: the dialog states the signature's meaning and asks for the password again
    page.click("#sign-button")
    dialog = page.locator("#sign-dialog")
    expect(dialog).to_be_visible()
    expect(page.locator("#sign-meaning")).to_have_text("reviewed and approved as the final report")
    page.fill("#sign-password", "not the password")
    page.click("#sign-confirm")
    expect(page.locator("#sign-error")).to_contain_text("password")
    page.fill("#sign-password", PASSWORD)
    with page.context.expect_page() as opened:
        page.click("#sign-confirm")
    pdf_tab = opened.value
    pdf_tab.wait_for_url(re.compile(r"/api/studies/DEMO-0002/pdf"))
    expect(dialog).to_be_hidden()
    expect(page.locator("#study-status")).to_have_text("signed")
    expect(page.locator("#signed-banner")).to_contain_text("Signed by Dr Anna Example")
    pdf = page.request.get(pdf_tab.url)
    assert pdf.ok and pdf.headers["content-type"] == "application/pdf"
    text = " ".join(
        "".join(p.extract_text() for p in PdfReader(io.BytesIO(pdf.body())).pages).split()
    )
    assert "Dr Anna Example" in text
    pdf_tab.close()

    # signed: read-only, with Amend and Addendum
    expect(page.locator("#f-indication")).to_be_disabled()
    expect(page.locator("#save-button")).to_be_hidden()
    expect(page.locator("#amend-button")).to_be_visible()
    expect(page.locator("#addendum-button")).to_be_visible()
    _shot(page, tmp_path, "signed")

    # amend: a reason is required, then edit and sign the amendment
    page.click("#amend-button")
    page.click("#amend-start")
    expect(page.locator("#amend-error")).to_be_visible()  # no reason given
    page.fill("#amend-reason", "Indication corrected after talking to the referrer")
    page.click("#amend-start")
    expect(page.locator("#amend-banner")).to_contain_text("Indication corrected")
    page.fill("#f-indication", "Known coronary disease, new breathlessness")
    page.click("#amend-sign-button")
    page.fill("#sign-password", PASSWORD)
    with page.context.expect_page() as opened:
        page.click("#sign-confirm")
    opened.value.close()
    expect(page.locator("#study-status")).to_have_text("amended")
    _, stored = _latest_study(lab.db, "DEMO-0002")
    assert stored["indication"] == "Known coronary disease, new breathlessness"
    amended = history.history(lab.db, "DEMO-0002")["versions"][-1]
    assert amended["reason"] == "Indication corrected after talking to the referrer"
    assert amended["status"] == "amended"

    # an addendum: its text and the password, a new signed version
    page.click("#addendum-button")
    expect(page.locator("#addendum-meaning")).to_have_text(
        "reviewed and approved as the final report"
    )
    page.fill("#addendum-text", "Images reviewed again with the referrer; no change.")
    page.fill("#addendum-password", PASSWORD)
    with page.context.expect_page() as opened:
        page.click("#addendum-confirm")
    opened.value.close()
    expect(page.locator("#status")).to_contain_text("Signed: DEMO-0002 version")
    assert history.history(lab.db, "DEMO-0002")["versions"][-1]["status"] == "appended"

    # history and audit view: every version and the events naming the study
    page.click("#history-link")
    expect(page.locator("#history-title")).to_contain_text("History of DEMO-0002")
    trail = history.history(lab.db, "DEMO-0002")
    rows = page.locator("#versions-table tbody tr")
    expect(rows).to_have_count(len(trail["versions"]))
    expect(rows.nth(len(trail["versions"]) - 2)).to_contain_text("Indication corrected")
    events = page.locator("#events-table tbody tr")
    expect(events).to_have_count(len(history.history(lab.db, "DEMO-0002")["events"]))
    for action in ("sign", "amend"):
        assert page.locator(f'#events-table tbody tr[data-event^="{action}"]').count() >= 1
    _shot(page, tmp_path, "history")

    # sign out: back to the sign-in form, and the study is no longer reachable
    page.click("#signout-button")
    expect(page.locator("#signin")).to_be_visible()
    expect(page.locator("#signin-message")).to_have_text("Signed out.")
    assert page.request.get(lab.base + "/api/studies/DEMO-0002").status == 401
    assert errors == []


def test_a_sonographers_save_reaches_the_readers_worklist_awaiting_reader(
    lab: Lab, browser: Any
) -> None:
    from playwright.sync_api import expect

    errors: list[str] = []
    sono = _page(browser, errors)
    _sign_in(sono, lab.base, "sam")
    expect(sono.locator("#nav-users")).to_be_hidden()
    _open(sono, "DEMO-0001")
    expect(sono.locator("#sign-button")).to_be_hidden()  # a sonographer cannot sign
    sono.click("#tab-peak")
    sono.fill("#f-stages-peak-heart_rate_bpm", "141")
    sono.click("#save-button")
    expect(sono.locator("#status")).to_contain_text("awaiting a reader")

    reader = _page(browser, errors)
    _sign_in(reader, lab.base, "ruth")
    reader.select_option("#filter-status", "unread")
    reader.click("#filter-apply")
    row = reader.locator('#worklist-table tbody tr[data-study="DEMO-0001"]')
    expect(row).to_contain_text("awaiting reader")
    expect(reader.locator("#worklist-table tbody tr")).to_have_count(1)

    # assign the study to ruth; the worklist filtered by reader shows it
    row.locator("input").fill("ruth")
    row.locator("button").click()
    expect(reader.locator("#status")).to_contain_text("DEMO-0001 assigned to ruth")
    reader.fill("#filter-reader", "ruth")
    reader.select_option("#filter-status", "")
    reader.click("#filter-apply")
    expect(reader.locator("#worklist-table tbody tr")).to_have_count(1)

    # the earlier study of the same patient is listed beside DEMO-0001, and once signed it is
    # the comparison: a segment made worse at peak is new ischaemia since then
    ruth = users.authenticate(lab.db, "ruth", PASSWORD, origin=CLI)
    signing.sign(lab.db, "DEMO-0001-P", ruth, origin=CLI)
    _open(reader, "DEMO-0001")
    expect(reader.locator("#earlier-list")).to_contain_text("DEMO-0001-P")
    expect(reader.locator("#comparison-prior")).to_have_text("DEMO-0001-P of 2025-10-14")
    reader.click("#tab-peak")
    reader.locator(
        'svg.bullseye[data-kind="wall_motion"][data-stage="peak"] .sector[data-segment="7"]'
    ).click()  # 1 -> 2 at peak, normal at rest: ischaemic (Marwick TH, Heart 2003;89:113, table 1)
    expect(reader.locator("#comparison-territories")).to_contain_text("LAD: new ischaemia")
    expect(reader.locator("#comparison-segments")).to_contain_text("7 (normal → ischemic)")
    assert errors == []


def test_an_admin_unlocks_a_user_and_adds_one_who_chooses_a_password(
    lab: Lab, browser: Any, tmp_path: Path
) -> None:
    from playwright.sync_api import expect

    from reporting.store.errors import AuthError

    settings = default_settings()
    for _ in range(settings.lockout_failures):  # ruth locks herself out
        with pytest.raises(AuthError):
            users.authenticate(lab.db, "ruth", "not her password", origin=CLI, settings=settings)
    errors: list[str] = []
    page = _page(browser, errors)
    _sign_in(page, lab.base, "anna")
    page.click("#nav-users")
    ruth = page.locator('#users-table tbody tr[data-user="ruth"]')
    expect(ruth).to_contain_text("locked")
    _shot(page, tmp_path, "users")
    ruth.locator("button").click()
    expect(ruth).to_contain_text("active")
    expect(page.locator("#status")).to_contain_text("ruth unlocked")

    # a new user with a first password, who must choose their own at first sign-in
    page.fill("#user-name", "tom")
    page.fill("#user-full", "Tom Example")
    page.check('#user-roles input[value="sonographer"]')
    page.fill("#user-password", "first password for tom")
    page.click("#user-add")
    expect(page.locator('#users-table tbody tr[data-user="tom"]')).to_contain_text("sonographer")
    page.click("#signout-button")
    page.fill("#signin-user", "tom")
    page.fill("#signin-password", "first password for tom")
    page.click("#signin-button")
    expect(page.locator("#password-screen")).to_be_visible()
    page.fill("#password-old", "first password for tom")
    page.fill("#password-new", "tom chose this one himself")
    page.fill("#password-again", "tom chose this one himself")
    page.click("#password-submit")
    expect(page.locator("#signin-message")).to_contain_text("Password changed")
    _sign_in(page, lab.base, "tom", "tom chose this one himself")
    expect(page.locator("#nav-users")).to_be_hidden()
    assert errors == []


def test_an_idle_page_signs_out_and_brings_back_unsaved_entries(lab: Lab, browser: Any) -> None:
    from playwright.sync_api import expect

    errors: list[str] = []
    page = _page(browser, errors)
    page.clock.install()
    _sign_in(page, lab.base, "ruth")
    _open(page, "DEMO-0001")
    page.fill("#f-comments", "typed before a long break")
    page.clock.fast_forward("16:00")  # the lab's default idle timeout is 15 minutes
    page.clock.run_for(6000)
    expect(page.locator("#signin")).to_be_visible()
    expect(page.locator("#signin-message")).to_contain_text("without activity")
    expect(page.locator("#f-comments")).to_have_value("")  # nothing left on the page
    # signing in again on this page (not reloaded) opens the study with the entries back on it
    page.fill("#signin-user", "ruth")
    page.fill("#signin-password", PASSWORD)
    page.click("#signin-button")
    expect(page.locator("#study-title")).to_have_text("Study DEMO-0001")
    expect(page.locator("#f-comments")).to_have_value("typed before a long break")
    expect(page.locator("#status")).to_contain_text("unsaved entries")
    assert errors == []
