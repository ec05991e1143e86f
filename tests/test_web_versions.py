"""No lost updates on the entry page's API: ETag on read, If-Match on save, drafts owned by a tab.

The rules are RFC 9110's conditional requests: a strong entity tag per stored version (section
8.8.3), ``If-Match`` evaluated before the write (section 13.1.1) with 412 Precondition Failed when
it does not match, and 428 Precondition Required (RFC 6585, section 3) for a save of an existing
study that sends no ``If-Match``. The oracle for a tag is :mod:`hashlib` over the bytes on disk.
"""

from __future__ import annotations

import hashlib
import json
import threading
import warnings
from pathlib import Path
from typing import Any

import pytest
import yaml
from conftest import NORMAL_17, study_dict

from reporting.load import load_study

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    from fastapi.testclient import TestClient

from reporting.web import create_app

TAB1 = {"x-client-id": "tab1"}
TAB2 = {"x-client-id": "tab2"}


def tag(content: bytes) -> str:
    return f'"{hashlib.sha256(content).hexdigest()}"'


def study(**changes: Any) -> dict[str, Any]:
    return study_dict(
        stages={
            "rest": {"heart_rate_bpm": 70, "wall_motion": NORMAL_17},
            "peak": {"heart_rate_bpm": 150, "wall_motion": "111111 221111 2311 3"},
        },
        **changes,
    )


@pytest.fixture
def studies(tmp_path: Path) -> Path:
    folder = tmp_path / "studies"
    folder.mkdir()
    return folder


@pytest.fixture
def client(studies: Path) -> TestClient:
    return TestClient(create_app(studies), base_url="http://127.0.0.1")


def test_get_sends_the_hash_of_the_stored_bytes(client: TestClient, studies: Path) -> None:
    # a file written by hand, not by the server: the tag is still the hash of its bytes
    (studies / "T-0001.yaml").write_text(yaml.safe_dump(study()), encoding="utf-8")
    response = client.get("/api/studies/T-0001")
    assert response.status_code == 200
    expected = tag((studies / "T-0001.yaml").read_bytes())
    assert response.headers["etag"] == response.json()["etag"] == expected


def test_a_second_tab_saving_an_old_version_gets_412_and_nothing_is_written(
    client: TestClient, studies: Path
) -> None:
    client.put("/api/studies/T-0001", json=study())
    opened_by_1 = client.get("/api/studies/T-0001").headers["etag"]
    opened_by_2 = client.get("/api/studies/T-0001").headers["etag"]
    first = client.put(
        "/api/studies/T-0001", json=study(indication="tab 1"), headers={"if-match": opened_by_1}
    )
    assert first.status_code == 200
    written = (studies / "T-0001.yaml").read_bytes()
    assert first.headers["etag"] == first.json()["etag"] == tag(written)

    second = client.put(
        "/api/studies/T-0001", json=study(indication="tab 2"), headers={"if-match": opened_by_2}
    )
    assert second.status_code == 412
    body = second.json()
    assert body["detail"].startswith("T-0001.yaml: the study changed since you opened it")
    # the study as it is now, so the page can say what changed
    assert body["current"]["study"]["indication"] == "tab 1"
    assert body["current"]["etag"] == second.headers["etag"] == tag(written)
    assert (studies / "T-0001.yaml").read_bytes() == written
    assert sorted(p.name for p in studies.iterdir()) == ["T-0001.yaml"]


def test_a_change_in_an_editor_is_not_overwritten(client: TestClient, studies: Path) -> None:
    client.put("/api/studies/T-0001", json=study())
    version = client.get("/api/studies/T-0001").headers["etag"]
    path = studies / "T-0001.yaml"
    edited = path.read_bytes() + b"# the reader's own note\n"
    path.write_bytes(edited)  # an editor saves the file behind the page's back
    response = client.put(
        "/api/studies/T-0001", json=study(indication="page"), headers={"if-match": version}
    )
    assert response.status_code == 412
    assert path.read_bytes() == edited


def test_a_study_removed_since_opening_is_412(client: TestClient, studies: Path) -> None:
    client.put("/api/studies/T-0001", json=study())
    version = client.get("/api/studies/T-0001").headers["etag"]
    (studies / "T-0001.yaml").unlink()
    response = client.put("/api/studies/T-0001", json=study(), headers={"if-match": version})
    assert response.status_code == 412
    assert "removed since you opened it" in response.json()["detail"]
    assert response.json()["current"] is None
    assert list(studies.iterdir()) == []


@pytest.mark.parametrize(
    ("header", "status"),
    [
        ("*", 200),  # any stored version (RFC 9110 13.1.1)
        ('"0000", {current}', 200),  # a list that holds the current tag
        ("W/{current}", 412),  # a weak tag never matches under strong comparison
        ('"0000"', 412),  # a tag of no stored version
        ("", 412),  # an empty header names no version
    ],
    ids=["star", "list", "weak", "other", "empty"],
)
def test_if_match_forms(client: TestClient, header: str, status: int) -> None:
    current = client.put("/api/studies/T-0001", json=study()).headers["etag"]
    response = client.put(
        "/api/studies/T-0001",
        json=study(indication="again"),
        headers={"if-match": header.format(current=current)},
    )
    assert response.status_code == status


def test_if_match_for_a_study_that_does_not_exist_is_412(client: TestClient, studies: Path) -> None:
    # the page believes it edits a stored study, but there is none: do not create it silently
    response = client.put("/api/studies/T-0001", json=study(), headers={"if-match": '"abc"'})
    assert response.status_code == 412
    assert list(studies.iterdir()) == []


@pytest.mark.parametrize("suffix", [".json", ".yml"], ids=["json", "yml"])
def test_saving_a_study_opened_from_a_file_writes_that_file(
    client: TestClient, studies: Path, suffix: str
) -> None:
    path = studies / f"T-0001{suffix}"
    data = study()
    path.write_text(
        json.dumps(data) if suffix == ".json" else yaml.safe_dump(data), encoding="utf-8"
    )
    version = client.get("/api/studies/T-0001").headers["etag"]
    response = client.put(
        "/api/studies/T-0001", json=study(indication="edited"), headers={"if-match": version}
    )
    assert response.status_code == 200
    assert response.json()["file"] == path.name
    assert sorted(p.name for p in studies.iterdir()) == [path.name]  # no second file beside it
    text = path.read_text(encoding="utf-8")
    parsed = json.loads(text) if suffix == ".json" else yaml.safe_load(text)  # same format
    assert parsed["indication"] == "edited"
    assert load_study(path).indication == "edited"


def test_a_file_whose_study_id_differs_from_its_name_keeps_its_name(
    client: TestClient, studies: Path
) -> None:
    # X.json holding study S-77: the page opens it as X and saves it back into X.json
    data = study()
    data["study"]["id"] = "S-77"
    (studies / "X.json").write_text(json.dumps(data), encoding="utf-8")
    opened = client.get("/api/studies/X")
    assert opened.json()["study"]["study"]["id"] == "S-77"
    body = opened.json()["study"] | {"comments": "read again"}
    response = client.put("/api/studies/X", json=body, headers={"if-match": opened.headers["etag"]})
    assert response.status_code == 200, response.text
    assert sorted(p.name for p in studies.iterdir()) == ["X.json"]
    # another id in the body is still refused: it would file one study under another's name
    other = body | {"study": body["study"] | {"id": "S-78"}}
    refused = client.put(
        "/api/studies/X", json=other, headers={"if-match": response.headers["etag"]}
    )
    assert refused.status_code == 422


def test_two_files_for_one_study_id_are_refused(client: TestClient, studies: Path) -> None:
    (studies / "T-0001.yaml").write_text(yaml.safe_dump(study()), encoding="utf-8")
    (studies / "T-0001.json").write_text(json.dumps(study()), encoding="utf-8")
    response = client.get("/api/studies/T-0001")
    assert response.status_code == 422
    assert response.json()["problems"][0]["location"] == "T-0001.yaml and T-0001.json"


def test_concurrent_saves_of_one_version_let_exactly_one_through(
    studies: Path,
) -> None:
    app = create_app(studies)
    client = TestClient(app, base_url="http://127.0.0.1")
    version = client.put("/api/studies/T-0001", json=study()).headers["etag"]
    statuses: list[int] = []

    def save(n: int) -> None:
        mine = TestClient(app, base_url="http://127.0.0.1")
        response = mine.put(
            "/api/studies/T-0001", json=study(indication=f"tab {n}"), headers={"if-match": version}
        )
        statuses.append(response.status_code)

    threads = [threading.Thread(target=save, args=(n,)) for n in range(6)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert sorted(statuses) == [200] + [412] * 5


# --- drafts belong to the tab that writes them ---------------------------------------------------


def test_another_tab_cannot_overwrite_or_delete_a_draft(client: TestClient, studies: Path) -> None:
    mine = {"study": {"study": {"id": "T-0001"}, "comments": "tab 1 typing"}}
    assert client.put("/api/drafts/tab1-1", json=mine, headers=TAB1).status_code == 200
    stored = (studies / ".drafts" / "tab1-1.json").read_bytes()
    overwrite = client.put("/api/drafts/tab1-1", json={"study": {}}, headers=TAB2)
    assert overwrite.status_code == 409
    assert "belongs to another page" in overwrite.json()["detail"]
    delete = client.delete("/api/drafts/tab1-1", headers=TAB2)
    assert delete.status_code == 409
    assert (studies / ".drafts" / "tab1-1.json").read_bytes() == stored
    # any tab may read it (to recover a closed tab's work) and the listing names its study
    assert client.get("/api/drafts/tab1-1").json()["form"] == mine
    assert client.get("/api/drafts").json()[0]["study_id"] == "T-0001"


@pytest.mark.parametrize(
    "headers",
    [{}, {"x-client-id": "../x"}],  # no tab id; a tab id that is not a safe id
    ids=["missing", "unsafe"],
)
def test_draft_writes_need_a_tab_id(client: TestClient, headers: dict[str, str]) -> None:
    response = client.put("/api/drafts/tab1-1", json={"study": {}}, headers=headers)
    assert response.status_code == 422
    assert response.json()["problems"][0]["location"] == "header x-client-id"


def test_openapi_describes_the_preconditions(client: TestClient) -> None:
    save = client.get("/openapi.json").json()["paths"]["/api/studies/{study_id}"]["put"]
    assert {"412", "428"} <= set(save["responses"])
    assert "If-Match" in [p["name"] for p in save["parameters"]]
