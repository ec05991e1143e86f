"""No 500s from the entry server: hostile bodies, odd files and unreadable folders get a located 4xx.

Every answer here must be a 4xx with a JSON body (never a traceback), and error bodies name files
relative to the studies folder, never by an absolute path. ``serve`` refuses an uncreatable folder
and a busy port with ``Error:`` and exit 1, as every command does.
"""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time
import tracemalloc
import warnings
from pathlib import Path
from typing import Any

import pytest
import yaml
from conftest import NORMAL_17, study_dict

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    from fastapi.testclient import TestClient

from reporting.web import create_app

TAB = {"x-client-id": "tab1"}
ROUTES = [
    ("POST", "/api/analyze", {}),
    ("PUT", "/api/studies/T-0001", {}),
    ("PUT", "/api/drafts/tab1-1", TAB),
]


def good() -> dict[str, Any]:
    return study_dict(
        stages={"rest": {"wall_motion": NORMAL_17}, "peak": {"wall_motion": NORMAL_17}}
    )


def with_comments(value: str) -> bytes:
    # json.dumps would escape nothing we want raw, so the body is assembled as text
    text = json.dumps(good())
    return text.replace('"schema_version"', f'"comments": {value}, "schema_version"', 1).encode()


def nested(levels: int) -> bytes:
    return with_comments("[" * levels + "]" * levels)


BODIES = [
    # deeper than the JSON parser's own stack: RecursionError inside json.loads
    pytest.param(b"[" * 100_000 + b"]" * 100_000, "study", "nested too deeply", id="deep-100000"),
    # deeper than the study-file limit of 64 levels, yet parseable
    pytest.param(
        nested(80), "study: comments.0.0.0.0.0.0.0.…", "nested more than 64 levels", id="deep-80"
    ),
    # Python refuses to turn 5000 digits into an int by default (CVE-2020-10735 limit)
    pytest.param(with_comments("1" * 5000), "study", "more than 4300 digits", id="5000-digits"),
    # 30 digits parse, but no measurement has them; float() of them would overflow later
    pytest.param(
        with_comments("1" * 30), "study: comments", "30 digits is too large", id="30-digits"
    ),
    # JSON allows the escape \ud800, but a lone surrogate is not Unicode text and cannot be written
    pytest.param(with_comments('"\\ud800"'), "study: comments", "lone surrogate", id="surrogate"),
    pytest.param(
        with_comments('{"\\udfff": 1}'), "study: comments", "lone surrogate", id="surrogate-key"
    ),
    # a raw NUL inside a JSON string is a control character JSON forbids
    pytest.param(with_comments('"a\x00b"'), "study: line 1", "invalid JSON", id="nul-raw"),
    # NaN and Infinity are not JSON numbers (Python accepts them)
    pytest.param(with_comments("NaN"), "study: comments", "not a finite number", id="nan"),
    pytest.param(with_comments("1e400"), "study: comments", "not a finite number", id="overflow"),
    # not UTF-8 at all
    pytest.param(b'{"a": "\xff"}', "study", "not UTF-8", id="latin-1"),
]


@pytest.fixture
def studies(tmp_path: Path) -> Path:
    return tmp_path / "studies"


@pytest.fixture
def client(studies: Path) -> TestClient:
    return TestClient(create_app(studies), base_url="http://127.0.0.1")


def refused(response: Any, status: int | tuple[int, ...] = 422) -> dict[str, Any]:
    statuses = status if isinstance(status, tuple) else (status,)
    assert response.status_code in statuses, response.text
    assert "Traceback" not in response.text and 'File "' not in response.text
    body: dict[str, Any] = response.json()
    return body


@pytest.mark.parametrize(("method", "address", "headers"), ROUTES, ids=["analyze", "save", "draft"])
@pytest.mark.parametrize(("body", "where", "problem"), BODIES)
def test_hostile_bodies_get_a_located_422(
    client: TestClient,
    studies: Path,
    method: str,
    address: str,
    headers: dict[str, str],
    body: bytes,
    where: str,
    problem: str,
) -> None:
    response = client.request(
        method, address, content=body, headers={"content-type": "application/json", **headers}
    )
    found = refused(response)["problems"]
    source = "draft" if "drafts" in address else "study"
    assert len(found) == 1 and found[0]["location"].startswith(where.replace("study", source, 1))
    assert problem in found[0]["problem"]
    assert sorted(p.name for p in studies.rglob("*") if p.is_file()) == []


def test_an_escaped_nul_is_text_and_round_trips(client: TestClient, studies: Path) -> None:
    # "\u0000" is valid JSON text; it must be written and read back, not crash the writer
    response = client.put(
        "/api/studies/T-0001",
        content=with_comments('"a\\u0000b"'),
        headers={"content-type": "application/json"},
    )
    assert response.status_code == 200, response.text
    assert client.get("/api/studies/T-0001").json()["study"]["comments"] == "a\x00b"


@pytest.mark.parametrize(
    "address",
    [
        "/api/studies/%00",  # NUL in the id
        "/api/studies/%ED%A0%80",  # an encoded lone surrogate
        "/api/drafts/a%00b",
        "/reports/%00.pdf",
        "/api/studies/" + "9" * 5000,  # a 5000-digit id
    ],
    ids=["nul", "surrogate", "draft-nul", "report-nul", "long-id"],
)
def test_hostile_addresses_get_a_4xx(client: TestClient, address: str) -> None:
    refused(client.get(address), (404, 422))


def test_the_page_with_a_hostile_study_parameter_still_renders(client: TestClient) -> None:
    response = client.get("/?study=%00%ED%A0%80")
    assert response.status_code == 200
    assert "Traceback" not in response.text


# --- odd files in the studies folder ------------------------------------------------------------


def test_a_fifo_named_like_a_study_is_refused_not_waited_on(
    client: TestClient, studies: Path
) -> None:
    os.mkfifo(studies / "T-0001.yaml")  # opening a FIFO for reading would block until a writer
    started = time.monotonic()
    body = refused(client.get("/api/studies/T-0001"))
    assert body["problems"][0] == {
        "location": "T-0001.yaml",
        "path": "T-0001.yaml",
        "problem": "is a named pipe (FIFO), not a regular file; a study file must be a regular file",
    }
    assert client.get("/api/studies").json()["studies"] == []
    assert time.monotonic() - started < 1


def test_a_huge_sparse_file_is_refused_at_once(client: TestClient, studies: Path) -> None:
    with open(studies / "T-0001.yaml", "wb") as handle:
        handle.truncate(4 * 1024**3)  # 4 GB of holes: nothing on disk, all of it readable
    tracemalloc.start()
    started = time.monotonic()
    opened = client.get("/api/studies/T-0001")
    listing = client.get("/api/studies")
    elapsed = time.monotonic() - started
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert "is at most 1,000,000" in refused(opened)["problems"][0]["problem"]
    assert listing.json()["studies"][0]["valid"] is False
    assert elapsed < 1 and peak < 100 * 1024**2


def test_the_listing_reads_only_the_head_of_each_file(
    client: TestClient, studies: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    data = good() | {"patient": {"name": "Ada Quist"}, "comments": "x" * 500_000}
    (studies / "T-0001.yaml").write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    sizes: list[int] = []
    real_read = os.read
    monkeypatch.setattr(os, "read", lambda fd, n: sizes.append(n) or real_read(fd, n))
    listed = client.get("/api/studies").json()["studies"]
    assert [(s["patient"], s["date"]) for s in listed] == [("Ada Quist", "2026-10-14")]
    assert 0 < sum(sizes) <= 8 * 1024


def test_unreadable_study_file_is_a_4xx_with_a_relative_name(
    client: TestClient, studies: Path, tmp_path: Path
) -> None:
    (studies / "T-0001.yaml").write_text("study: [unclosed\n", encoding="utf-8")
    body = refused(client.get("/api/studies/T-0001"))
    assert body["problems"][0]["location"].startswith("T-0001.yaml: line 2")
    assert str(tmp_path) not in json.dumps(body)


def test_report_errors_name_files_relative_to_the_studies_folder(
    client: TestClient, studies: Path, tmp_path: Path
) -> None:
    (studies / "T-0001.yaml").write_text(
        yaml.safe_dump(study_dict(protocol="rowing"), sort_keys=False)
    )
    broken = refused(client.post("/api/studies/T-0001/report"))
    assert broken["problems"][0]["location"].startswith("study: T-0001.yaml")
    assert str(tmp_path) not in json.dumps(broken)
    # the reports folder cannot be made: a file is in its place
    (studies / "T-0002.yaml").write_text(
        yaml.safe_dump(good() | {"study": good()["study"] | {"id": "T-0002"}}, sort_keys=False)
    )
    (studies / "reports").write_text("not a folder")
    blocked = refused(client.post("/api/studies/T-0002/report"), (409, 422))
    assert "reports" in json.dumps(blocked) and str(tmp_path) not in json.dumps(blocked)


@pytest.mark.parametrize(
    "address", ["/api/studies", "/api/drafts", "/"], ids=["studies", "drafts", "page"]
)
def test_an_unreadable_studies_folder_is_a_4xx(
    client: TestClient, studies: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, address: str
) -> None:
    (studies / ".drafts").mkdir()
    real_iterdir, real_glob = Path.iterdir, Path.glob

    def denied(path: Path, *args: Any) -> Any:
        if path in (studies, studies / ".drafts"):
            raise PermissionError(13, "Permission denied", str(path))
        return (real_iterdir if not args else real_glob)(path, *args)

    # the tests run as root in CI, where chmod 000 does not stop reading, so the refusal is staged
    monkeypatch.setattr(Path, "iterdir", denied)
    monkeypatch.setattr(Path, "glob", denied)
    body = refused(client.get(address))
    assert "cannot list: Permission denied" in body["problems"][0]["problem"]
    assert str(tmp_path) not in json.dumps(body)


@pytest.mark.skipif(os.geteuid() == 0, reason="root reads folders whatever their mode")
def test_a_folder_without_read_permission_is_a_4xx(
    client: TestClient, studies: Path, tmp_path: Path
) -> None:
    studies.chmod(0)
    try:
        body = refused(client.get("/api/studies"))
    finally:
        studies.chmod(0o755)
    assert str(tmp_path) not in json.dumps(body)


# --- serve --------------------------------------------------------------------------------------


def run_serve(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "reporting", "serve", *args],
        capture_output=True,
        text=True,
        timeout=60,
        cwd=Path(__file__).resolve().parents[1],
    )


def test_serve_on_an_uncreatable_folder_is_an_error(tmp_path: Path) -> None:
    (tmp_path / "plain-file").write_text("")
    target = tmp_path / "plain-file" / "studies"  # a folder cannot be made inside a file
    result = run_serve("--studies", str(target), "--port", "1")
    assert result.returncode == 1
    assert (
        result.stderr.strip()
        == f"Error: {target}: cannot create the studies folder: Not a directory"
    )
    assert "Traceback" not in result.stderr


def test_serve_on_a_busy_port_is_an_error(tmp_path: Path) -> None:
    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen()
        port = busy.getsockname()[1]
        result = run_serve("--studies", str(tmp_path / "s"), "--port", str(port))
    assert result.returncode == 1
    assert result.stderr.strip() == (
        f"Error: --port {port}: 127.0.0.1:{port} is already in use; "
        "stop the other server or choose another --port"
    )
