"""The entry server's API through FastAPI's test client: analysis, files, drafts and safety."""

from __future__ import annotations

import hashlib
import io
import json
import warnings
from pathlib import Path
from typing import Any

import pytest
import yaml
from conftest import NORMAL_17, study_dict
from pypdf import PdfReader

from reporting.analysis import analyze
from reporting.export.record import record_dict
from reporting.load import load_study, study_from_data

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # newer starlette asks for another HTTP client package
    from fastapi.testclient import TestClient

from reporting.web import create_app

TAB1 = {"x-client-id": "tab1"}  # the page's tab id, which owns its drafts
PEAK_LAD = "111111 221111 2311 3"  # hypokinetic 7, 8, 13; akinetic 14 and the apex: LAD ischaemia


def lad_study(**changes: Any) -> dict[str, Any]:
    """Rest normal, peak with LAD ischaemia; JSON-ready (dates as text)."""
    data = study_dict(
        stages={
            "rest": {"heart_rate_bpm": 70, "systolic_bp_mmhg": 120, "wall_motion": NORMAL_17},
            "peak": {"heart_rate_bpm": 150, "systolic_bp_mmhg": 150, "wall_motion": PEAK_LAD},
        },
        **changes,
    )
    return data


@pytest.fixture
def studies(tmp_path: Path) -> Path:
    return tmp_path / "studies"


@pytest.fixture
def client(studies: Path) -> TestClient:
    # the server answers only loopback host names, so the client says it is talking to 127.0.0.1
    return TestClient(create_app(studies), base_url="http://127.0.0.1")


def etag_hex(content: bytes) -> str:
    """The entity tag the server should send: SHA-256 of the stored bytes, quoted (RFC 9110 8.8.3)."""
    return f'"{hashlib.sha256(content).hexdigest()}"'


def problems(response: Any) -> list[str]:
    return [f"{p['location']}: {p['problem']}" for p in response.json()["problems"]]


# --- /api/analyze ----------------------------------------------------------------------------


def test_analyze_returns_the_command_line_record_and_narrative(client: TestClient) -> None:
    data = lad_study()
    response = client.post("/api/analyze", json=data)
    assert response.status_code == 200
    body = response.json()
    # the same analysis code as `segreport analyze`, record for record
    assert body["record"] == record_dict(analyze(study_from_data(data)))
    # WMSI = sum of scores ÷ segments scored (Lang RM et al., JASE 2015;28:1): 24 / 17 at peak
    assert body["record"]["wmsi"]["peak"] == pytest.approx(24 / 17)
    assert body["record"]["conclusion"]["ischemic_territories"] == ["LAD"]
    assert "Positive for inducible ischaemia in the LAD territory" in body["narrative_text"]
    assert body["summary"].startswith("Positive for inducible ischaemia")
    assert body["territory_boundaries"].startswith("M ")


@pytest.mark.parametrize(
    ("change", "expected"),
    [
        # 4 characters for a 17-segment model: the CLI's message, located at the score set
        (
            {"stages": {"rest": {"wall_motion": "1111"}}},
            "study: stages.rest.wall_motion: 4 scores given; the 17-segment model needs 17 "
            "(none for segment 5–17; use x for not visualised)",
        ),
        # a perfusion score above 3 (scores are 1–3)
        (
            {
                "stages": {
                    "rest": {
                        "wall_motion": NORMAL_17,
                        "perfusion": {**{str(n): 1 for n in range(1, 17)}, "17": 4},
                    }
                }
            },
            "study: stages.rest.perfusion: segment 17: perfusion score 4 is out of range (1–3)",
        ),
        # a heart rate typed as words
        (
            {"stages": {"rest": {"heart_rate_bpm": "fast", "wall_motion": NORMAL_17}}},
            "study: stages.rest.heart_rate_bpm: 'fast' is not a number",
        ),
        # the study id is used in file names, so a path is refused
        (
            {"study": {"id": "../etc/passwd", "date": "2026-10-14"}},
            "study: study.id: id '../etc/passwd' must be 1–64 letters, digits, '.', '_' or '-' "
            "and not '.' or '..' (it is used in file names)",
        ),
    ],
    ids=["too-few-scores", "perfusion-out-of-range", "heart-rate-not-number", "id-with-path"],
)
def test_analyze_refuses_bad_studies_with_located_problems(
    client: TestClient, change: dict[str, Any], expected: str
) -> None:
    response = client.post("/api/analyze", json=study_dict(**change))
    assert response.status_code == 422
    assert expected in problems(response)
    first = response.json()["problems"][0]
    assert first["path"] and not first["path"].startswith("study:")


def test_analyze_lists_every_problem_at_once(client: TestClient) -> None:
    data = study_dict(protocol="rowing", stages={"rest": {"wall_motion": "11111q"}})
    del data["study"]["date"]
    found = problems(client.post("/api/analyze", json=data))
    assert "study: study: required field 'date' is missing" in found
    assert any(p.startswith("study: protocol: 'rowing' is not allowed") for p in found)
    assert any("character 6 is 'q'" in p for p in found)


@pytest.mark.parametrize(
    ("body", "expected"),
    [
        (
            b"{not json",
            "study: line 1, column 2: invalid JSON: Expecting property name enclosed in double quotes",
        ),
        (
            b"[1, 2]",
            "study: the study file must hold a mapping (schema_version, study, protocol, stages, …)",
        ),
        (b"", "study: the request has no body; send the study as JSON"),
    ],
    ids=["broken-json", "not-a-mapping", "empty"],
)
def test_analyze_refuses_unreadable_bodies(client: TestClient, body: bytes, expected: str) -> None:
    response = client.post(
        "/api/analyze", content=body, headers={"content-type": "application/json"}
    )
    assert response.status_code == 422
    assert problems(response) == [expected]


def test_lab_map_outside_the_studies_folder_is_refused(client: TestClient, tmp_path: Path) -> None:
    outside = tmp_path / "elsewhere.yaml"
    outside.write_text("17: {}\n")
    response = client.post("/api/analyze", json=lad_study(territory_map="../elsewhere.yaml"))
    assert response.status_code == 422
    assert problems(response) == ["territory_map: the file must lie inside the studies folder"]


def test_left_dominant_map_changes_territories_and_boundaries(client: TestClient) -> None:
    standard = client.post("/api/analyze", json=lad_study()).json()
    left = client.post("/api/analyze", json=lad_study(territory_map="left_dominant")).json()
    # left-dominant variant: 3, 4, 9, 10, 15 to LCx (the published standard, design choice)
    assert left["record"]["territories"]["LCx"]["segments"] == [3, 4, 5, 6, 9, 10, 11, 12, 15, 16]
    assert left["territory_boundaries"] != standard["territory_boundaries"]


# --- study files -----------------------------------------------------------------------------


def test_save_list_open_round_trip(client: TestClient, studies: Path) -> None:
    data = lad_study(patient={"name": "Wren Adebayo-Lund", "age_years": 58, "sex": "male"})
    data["stages"]["peak"]["perfusion"] = {str(n): 1 for n in range(1, 18)} | {"14": "x"}
    response = client.put("/api/studies/T-0001", json=data)
    assert response.status_code == 200, response.text
    body = response.json()
    assert (body["id"], body["file"]) == ("T-0001", "T-0001.yaml")

    path = studies / "T-0001.yaml"
    # the version is the hash of the bytes written, in the header and the body
    assert body["etag"] == response.headers["etag"] == etag_hex(path.read_bytes())
    text = path.read_text(encoding="utf-8")
    assert "wall_motion: 111111 221111 2311 3" in text  # the character form, grouped by ring
    assert "perfusion: 111111 111111 1x11 1" in text
    assert "date: 2026-10-14" in text
    # the file on disk is a study file the command line reads back to the same study
    assert load_study(path) == study_from_data(data)
    assert not list(studies.glob(".*.part"))  # written through write_atomic

    listing = client.get("/api/studies").json()
    assert [(s["id"], s["patient"], s["date"]) for s in listing["studies"]] == [
        ("T-0001", "Wren Adebayo-Lund", "2026-10-14")
    ]
    got = client.get("/api/studies/T-0001")
    assert got.headers["etag"] == body["etag"]
    opened = got.json()
    assert opened["etag"] == body["etag"]
    assert opened["file"] == "T-0001.yaml" and opened["problems"] == []
    assert opened["study"]["stages"]["peak"]["wall_motion"] == PEAK_LAD
    assert study_from_data(opened["study"]) == study_from_data(data)


def test_save_refuses_to_replace_a_file_without_if_match(client: TestClient, studies: Path) -> None:
    first = client.put("/api/studies/T-0001", json=lad_study())
    assert first.status_code == 200
    before = (studies / "T-0001.yaml").read_bytes()
    # no If-Match for an existing study: 428 Precondition Required (RFC 6585, section 3)
    for address in ("/api/studies/T-0001", "/api/studies/T-0001?overwrite=true"):
        again = client.put(address, json=lad_study(indication="second reading"))
        assert again.status_code == 428
        assert again.json()["detail"].startswith("T-0001.yaml: the study exists; send If-Match")
    assert (studies / "T-0001.yaml").read_bytes() == before
    replaced = client.put(
        "/api/studies/T-0001",
        json=lad_study(indication="second"),
        headers={"if-match": first.headers["etag"]},
    )
    assert replaced.status_code == 200
    assert replaced.headers["etag"] != first.headers["etag"]
    assert client.get("/api/studies/T-0001").json()["study"]["indication"] == "second"


def test_save_refuses_an_invalid_study_and_writes_nothing(
    client: TestClient, studies: Path
) -> None:
    data = lad_study()
    data["stages"]["peak"]["wall_motion"] = "1111115"  # 7 scores, and 5 without the 5-point scale
    response = client.put("/api/studies/T-0001", json=data)
    assert response.status_code == 422
    assert (
        "study: stages.peak.wall_motion: segment 7: score 5 (aneurysmal) needs wall_motion_scale: 5"
        in problems(response)
    )
    assert not (studies / "T-0001.yaml").exists()


def test_save_refuses_an_id_that_differs_from_the_address(client: TestClient) -> None:
    response = client.put("/api/studies/OTHER-1", json=lad_study())
    assert response.status_code == 422
    assert problems(response) == [
        "study: study.id: the study id 'T-0001' differs from 'OTHER-1' in the address"
    ]


def test_opening_a_file_with_problems_gives_data_and_problems(
    client: TestClient, studies: Path
) -> None:
    studies.mkdir(parents=True, exist_ok=True)
    data = lad_study()
    data["stages"]["peak"]["wall_motion"] = "11111"
    (studies / "T-0001.yaml").write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    body = client.get("/api/studies/T-0001").json()
    assert body["study"]["stages"]["peak"]["wall_motion"] == "11111"
    assert [p["location"] for p in body["problems"]] == ["T-0001.yaml: stages.peak.wall_motion"]
    # the listing reads only the head of each file, so it leaves the check to opening
    assert client.get("/api/studies").json()["studies"][0]["valid"] is None


def test_missing_study_is_404(client: TestClient) -> None:
    response = client.get("/api/studies/NOPE-1")
    assert response.status_code == 404
    assert "NOPE-1" in response.json()["detail"]


# --- drafts ----------------------------------------------------------------------------------


def test_drafts_keep_incomplete_work(client: TestClient, studies: Path) -> None:
    half_done = {"study": {"schema_version": 1, "stages": {"rest": {"wall_motion": {"1": 2}}}}}
    saved = client.put("/api/drafts/tab1-1", json=half_done, headers=TAB1)
    assert saved.status_code == 200 and saved.json()["id"] == "tab1-1"
    stored = json.loads((studies / ".drafts" / "tab1-1.json").read_text(encoding="utf-8"))
    assert stored["form"] == half_done and stored["client"] == "tab1"
    assert [d["id"] for d in client.get("/api/drafts").json()] == ["tab1-1"]
    assert client.get("/api/drafts/tab1-1").json()["form"] == half_done
    assert client.get("/api/studies").json()["drafts"][0]["id"] == "tab1-1"
    assert client.delete("/api/drafts/tab1-1", headers=TAB1).json() == {"deleted": True}
    assert client.get("/api/drafts/tab1-1").status_code == 404


def test_drafts_folder_can_live_elsewhere(tmp_path: Path) -> None:
    client = TestClient(
        create_app(tmp_path / "s", drafts_dir=tmp_path / "d"), base_url="http://127.0.0.1"
    )
    assert client.put("/api/drafts/S-1", json={"study": {}}, headers=TAB1).status_code == 200
    assert (tmp_path / "d" / "S-1.json").is_file()


# --- safety ----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "address",
    [
        "/api/studies/..",  # the parent folder by name (the client may tidy it away: 404)
        "/api/studies/%2e",  # the folder itself, encoded so it reaches the server
        "/api/studies/..%2F..%2Fetc%2Fpasswd",  # an encoded slash
        "/api/studies/%2e%2e",
        "/api/drafts/..",
        "/api/drafts/..%2Fsecret",
        "/reports/..%2Fstudy.yaml",
        "/reports/.hidden.pdf",
    ],
)
def test_paths_outside_the_folder_are_refused(
    client: TestClient, address: str, tmp_path: Path
) -> None:
    (tmp_path / "secret.json").write_text("{}")
    response = client.get(address)
    assert response.status_code in (404, 422)
    assert "secret" not in response.text or response.status_code == 404


@pytest.mark.parametrize(
    "address", ["/api/studies/..", "/api/drafts/..", "/api/drafts/a%2F..%2F..%2Fx"]
)
def test_writes_outside_the_folder_are_refused(
    client: TestClient, address: str, tmp_path: Path
) -> None:
    response = client.put(address, json=lad_study())
    assert response.status_code in (404, 405, 422)
    assert sorted(p.name for p in tmp_path.rglob("*") if p.is_file()) == []


def test_bad_id_in_the_address_is_a_located_422(client: TestClient) -> None:
    response = client.get("/api/studies/%2E%2E")  # encoded, so the client leaves it alone
    assert response.status_code == 422
    assert problems(response) == [
        "path: study_id: id '..' must be 1–64 letters, digits, '.', '_' or '-' and not '.' or '..' "
        "(it is used in file names)"
    ]


def test_oversize_body_is_refused(client: TestClient, studies: Path) -> None:
    data = lad_study(comments="x" * (300 * 1024))
    response = client.put("/api/studies/T-0001", json=data)
    assert response.status_code == 413
    assert "larger than 256 KB" in response.json()["detail"]
    assert not (studies / "T-0001.yaml").exists()


def test_oversize_chunked_body_is_refused(client: TestClient) -> None:
    def chunks() -> Any:
        for _ in range(40):
            yield b" " * 10_000

    response = client.post(
        "/api/analyze", content=chunks(), headers={"content-type": "application/json"}
    )
    assert response.status_code == 413


def test_cross_site_requests_are_refused(client: TestClient, studies: Path) -> None:
    # a page elsewhere may post a "simple" text/plain body without asking first
    plain = client.put(
        "/api/studies/T-0001",
        content=json.dumps(lad_study()),
        headers={"content-type": "text/plain"},
    )
    assert plain.status_code == 415
    other = client.post("/api/analyze", json=lad_study(), headers={"origin": "http://evil.invalid"})
    assert other.status_code == 403
    assert not (studies / "T-0001.yaml").exists()


def test_only_loopback_host_names_are_answered(studies: Path) -> None:
    rebound = TestClient(create_app(studies), base_url="http://attacker.invalid")
    assert rebound.get("/api/studies").status_code == 421


def test_page_escapes_a_hostile_study_field(client: TestClient) -> None:
    hostile = '</script><script>alert("owned")</script><img src=x onerror=alert(1)>'
    data = lad_study(patient={"name": hostile, "age_years": 60}, indication=hostile)
    assert client.put("/api/studies/T-0001", json=data).status_code == 200
    for address in ("/", "/?study=T-0001"):
        page = client.get(address)
        assert page.status_code == 200
        assert "<script>alert" not in page.text
        assert "<img src=x" not in page.text
        assert "onerror=alert(1)>" not in page.text
    # the name is in the opener list and the embedded study data, as text
    assert "&lt;/script&gt;&lt;script&gt;alert(" in client.get("/").text
    assert "\\u003c/script\\u003e" in client.get("/?study=T-0001").text
    # and the analysis narrative's HTML form is escaped by its own template environment
    html = client.post("/api/analyze", json=data).json()["narrative_html"]
    assert "<script>" not in html


def test_page_is_self_contained(client: TestClient) -> None:
    page = client.get("/")
    assert page.status_code == 200
    assert "default-src 'self'" in page.headers["content-security-policy"]
    assert "http://" not in page.text and "https://" not in page.text  # no CDN, no web fonts
    for asset in ("/static/entry.js", "/static/entry.css"):
        assert client.get(asset).status_code == 200
    assert "Decision support for qualified clinicians" in page.text
    assert "Follow local protocols, current product labelling" in page.text


def test_openapi_is_published_with_the_study_schema(client: TestClient) -> None:
    schema = client.get("/openapi.json").json()
    analyze_op = schema["paths"]["/api/analyze"]["post"]
    assert analyze_op["requestBody"]["content"]["application/json"]["schema"] == {
        "$ref": "#/components/schemas/Study"
    }
    assert "stages" in schema["components"]["schemas"]["Study"]["properties"]
    assert "422" in analyze_op["responses"]
    assert {"/api/studies", "/api/studies/{study_id}", "/api/drafts/{draft_id}"} <= set(
        schema["paths"]
    )
    # the interactive documentation pages load scripts from a CDN, so they are off
    assert client.get("/docs").status_code == 404


# --- reports ---------------------------------------------------------------------------------


def test_report_writes_and_serves_the_pdf(client: TestClient, studies: Path) -> None:
    assert client.put("/api/studies/T-0001", json=lad_study()).status_code == 200
    response = client.post("/api/studies/T-0001/report")
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["pdf"] == "/reports/T-0001.pdf"
    assert "/reports/T-0001.record.json" in body["files"]
    assert (studies / "reports" / "T-0001.pdf").is_file()

    pdf = client.get(body["pdf"])
    assert pdf.status_code == 200
    assert pdf.headers["content-type"] == "application/pdf"
    text = "".join(page.extract_text() for page in PdfReader(io.BytesIO(pdf.content)).pages)
    # WMSI at peak = 24 / 17 = 1.41 (Lang RM et al., JASE 2015;28:1)
    assert "WMSI 1.41 (17 scored)" in text
    assert "WMSI 1.00 (17 scored)" in text
    assert "T-0001" in text


def test_report_needs_a_saved_study(client: TestClient) -> None:
    response = client.post("/api/studies/T-9999/report")
    assert response.status_code == 404
    assert "save the study first" in response.json()["detail"]


def test_serve_binds_to_loopback_only(monkeypatch: pytest.MonkeyPatch, studies: Path) -> None:
    import uvicorn

    from reporting.web import serve

    seen: dict[str, Any] = {}

    def run(server: uvicorn.Server, sockets: list[Any]) -> None:
        seen.update(host=server.config.host, address=sockets[0].getsockname())

    monkeypatch.setattr(uvicorn.Server, "run", run)
    serve(studies, port=0)
    assert seen["host"] == "127.0.0.1" and seen["address"][0] == "127.0.0.1"
    assert studies.is_dir()
