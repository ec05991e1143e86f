"""``segreport store …`` through the command line: password input, located errors, exit codes,
and the export against ``segreport batch --no-pdf`` on the same files."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner, Result
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from store_support import PASSWORD, cheap_argon2, study_data, write_study

from reporting.cli import main

__all__ = ["cheap_argon2"]


def run(*args: str, stdin: str = "") -> Result:
    return CliRunner().invoke(main, ["store", *args], input=stdin, catch_exceptions=False)


@pytest.fixture
def db(tmp_path: Path) -> str:
    path = str(tmp_path / "s.db")
    result = run(
        "init",
        "--db",
        path,
        "--admin",
        "alice",
        "--full-name",
        "Dr Alice Example",
        "--password-stdin",
        stdin=PASSWORD + "\n",
    )
    assert result.exit_code == 0, result.output
    return path


def as_alice(db: str, *args: str, extra: str = "") -> Result:
    return run(
        *args, "--db", db, "--as", "alice", "--password-stdin", stdin=PASSWORD + "\n" + extra
    )


def test_help_does_not_import_the_store_libraries() -> None:
    code = (
        "import sys\nfrom click.testing import CliRunner\nfrom reporting.cli import main\n"
        "CliRunner().invoke(main, ['--help'])\n"
        "print([m for m in ('sqlalchemy', 'alembic', 'argon2', 'psycopg') if m in sys.modules])"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_store_workflow_through_the_command_line(db: str, tmp_path: Path) -> None:
    path = write_study(tmp_path / "in", study_data())
    assert as_alice(db, "import", str(path)).exit_code == 0
    signed = as_alice(db, "sign", "DEMO-0001", "--meaning", "reviewed and approved")
    assert signed.exit_code == 0, signed.output
    result = run("history", "DEMO-0001", "--json", "--db", db)
    data = json.loads(result.output)
    assert data["study_id"] == "DEMO-0001" and data["versions"][0]["status"] == "final"
    verify = run("verify", "--db", db)
    head = verify.stdout.strip().splitlines()[-1]
    assert verify.exit_code == 0 and len(head) == 64
    assert run("verify", "--db", db, "--expect-head", head).exit_code == 0
    out = run("show", "DEMO-0001", "--version", "1", "-o", str(tmp_path / "show"), "--db", db)
    assert out.exit_code == 0
    from pypdf import PdfReader

    text = "".join(
        PdfReader(tmp_path / "show" / "DEMO-0001.v1.pdf").pages[-1].extract_text().split()
    )
    printed = re.search(r"Auditchainhead([0-9a-f]{64})", text)
    assert printed is not None, text
    # the head printed at signing is an earlier link of the same chain
    assert printed.group(1) != head
    assert run("verify", "--db", db, "--expect-head", printed.group(1)).exit_code == 0
    assert run("verify", "--db", db, "--expect-head", "ab" * 32).exit_code == 1
    assert data["versions"][0]["signature"]["pdf_sha256"] in signed.output


@pytest.mark.parametrize(
    ("args", "stdin", "message"),
    [
        (
            ("sign", "DEMO-0001"),
            "wrong password here\n",
            "Error: --as alice: wrong password",
        ),  # bad: wrong password
        (
            ("amend", "DEMO-0001", "FILE"),
            PASSWORD + "\n",
            "Error: --reason: an amendment needs a reason",
        ),  # bad: no reason
        (
            ("sign", "NOPE-1"),
            PASSWORD + "\n",
            "Error: study NOPE-1: not in the store",
        ),  # bad: unknown study
        (("sign", "DEMO-0001"), "", "Error: --password-stdin: no line"),  # bad: no password given
    ],
    ids=["wrong-password", "amend-without-reason", "unknown-study", "no-password"],
)
def test_bad_input_is_one_located_error_line(
    db: str, tmp_path: Path, args: tuple[str, ...], stdin: str, message: str
) -> None:
    path = write_study(tmp_path / "in", study_data())
    as_alice(db, "import", str(path))
    as_alice(db, "sign", "DEMO-0001") if "amend" in args else None
    args = tuple(str(path) if a == "FILE" else a for a in args)
    result = run(*args, "--db", db, "--as", "alice", "--password-stdin", stdin=stdin)
    assert result.exit_code == 1
    assert result.stderr.strip().splitlines()[-1].startswith(message), result.stderr
    assert "Traceback" not in result.output


def test_commands_other_than_init_refuse_to_create_a_store(tmp_path: Path) -> None:
    path = tmp_path / "none.db"
    result = run("history", "X", "--db", str(path))
    assert result.exit_code == 1 and "no store here" in result.stderr and not path.exists()


def test_export_writes_the_same_registry_and_tables_as_batch(db: str, tmp_path: Path) -> None:
    folder = tmp_path / "studies"
    for name in ("DEMO-0001", "DEMO-0002", "DEMO-0003"):
        data = study_data(name)
        # in the store only signing makes a report final; a file's own claim is not carried over
        data["study"]["report_status"] = "preliminary"
        write_study(folder, data)
    assert as_alice(db, "import", *map(str, sorted(folder.glob("*.yaml")))).exit_code == 0
    batch = CliRunner().invoke(
        main, ["batch", str(folder), "-o", str(tmp_path / "batch"), "--no-pdf", "-q"]
    )
    assert batch.exit_code == 0, batch.output
    assert run("export", "-o", str(tmp_path / "export"), "--db", db).exit_code == 0
    for name in ("registry.ndjson", "studies.csv", "segments.csv"):
        assert (tmp_path / "export" / name).read_text() == (
            tmp_path / "batch" / name
        ).read_text(), name
    assert as_alice(db, "sign", "DEMO-0002").exit_code == 0
    assert run("export", "-o", str(tmp_path / "final"), "--final-only", "--db", db).exit_code == 0
    lines = (tmp_path / "final" / "registry.ndjson").read_text().splitlines()
    assert [json.loads(x)["study"]["id"] for x in lines] == ["DEMO-0002"]
    head = (tmp_path / "final" / "chain-head.txt").read_text().strip()
    assert run("verify", "--expect-head", head, "--db", db).exit_code == 0


def test_deidentified_export_holds_no_names(
    db: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("SEGREPORT_DEID_KEY", "a test key of enough length")
    path = write_study(tmp_path / "in", study_data())
    as_alice(db, "import", str(path))
    assert run("export", "-o", str(tmp_path / "deid"), "--deidentify", "--db", db).exit_code == 0
    registry = (tmp_path / "deid" / "registry.ndjson").read_text()
    assert "Brennan Quillfeather" not in registry and "DEMO-0001" not in registry


def test_an_export_is_an_audit_event_naming_its_chain_head(
    db: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Taking records out of the store is traced (21 CFR 11.10(e)): the event says what kind of
    # export it was and which chain head it was taken at, and holds no path or key.
    from reporting.store.audit import body_of
    from reporting.store.schema import EventRow
    from reporting.store.service import open_store

    monkeypatch.setenv("SEGREPORT_DEID_KEY", "a test key of enough length")
    as_alice(db, "import", str(write_study(tmp_path / "in", study_data())))
    out = tmp_path / "Quillfeather export"
    assert run("export", "-o", str(out), "--deidentify", "--db", db).exit_code == 0
    head = (out / "chain-head.txt").read_text().strip()
    with open_store(db).read() as session:
        last = session.query(EventRow).order_by(EventRow.seq.desc()).first()
        assert last is not None
        body = body_of(last)
    assert (last.action, last.actor) == ("export", None)
    assert body["detail"]["chain_head"] == head and body["detail"]["deidentified"] is True
    assert "Quillfeather" not in last.body.decode() and "test key" not in last.body.decode()
    assert run("verify", "--expect-head", head, "--db", db).exit_code == 0


ACTIONS = st.lists(
    st.sampled_from(["import-change", "sign", "amend", "addendum"]), min_size=1, max_size=6
)


@settings(
    max_examples=8, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(actions=ACTIONS)
def test_any_sequence_keeps_every_signed_pdf_byte_identical(
    tmp_path_factory: pytest.TempPathFactory, actions: list[str]
) -> None:
    from hashlib import sha256

    from reporting.store import history, service, signing, users, versions
    from reporting.store.canonical import Origin
    from reporting.store.errors import StoreError

    tmp = tmp_path_factory.mktemp("prop")
    db = service.init_store(
        str(tmp / "s.db"), "alice", full_name=None, password=PASSWORD, origin=Origin.CLI
    )
    who = users.authenticate(db, "alice", PASSWORD, origin=Origin.CLI)
    data = study_data()
    versions.import_files(db, [write_study(tmp / "in", data)], who, origin=Origin.CLI)
    signed: dict[int, str] = {}
    for step, action in enumerate(actions):
        data["stages"]["peak"]["heart_rate_bpm"] = 120 + step
        try:
            if action == "import-change":
                versions.import_files(db, [write_study(tmp / "in", data)], who, origin=Origin.CLI)
            elif action == "sign":
                s = signing.sign(db, "DEMO-0001", who, origin=Origin.CLI)
                signed[s.version] = s.pdf_sha256
            elif action == "amend":
                path = write_study(tmp / "amend", data)
                s = signing.amend(
                    db, "DEMO-0001", who, path=path, reason=f"step {step}", origin=Origin.CLI
                )
                signed[s.version] = s.pdf_sha256
            else:
                s = signing.amend(db, "DEMO-0001", who, addendum=f"note {step}", origin=Origin.CLI)
                signed[s.version] = s.pdf_sha256
        except StoreError:
            pass  # refused acts (signing twice, amending unsigned, importing over signed) write nothing
        for number, digest in signed.items():
            pdf = history.show(db, "DEMO-0001", number, tmp / "show")[2].read_bytes()
            assert sha256(pdf).hexdigest() == digest
    db.dispose()


def test_store_commands_take_the_lab_settings(db: str, tmp_path: Path) -> None:
    # As `serve --db --settings` does: the lab's thresholds for the signed analysis (Tanaka H et
    # al., JACC 2001;37:153: 208 − 0.7 × age) and its lockout for wrong passwords.
    lab = tmp_path / "lab.yaml"
    lab.write_text("heart_rate_formula: tanaka\nlockout_failures: 2\n")
    path = write_study(tmp_path / "in", study_data())
    assert as_alice(db, "import", str(path), "--settings", str(lab)).exit_code == 0
    signed = as_alice(db, "sign", "DEMO-0001", "--settings", str(lab))
    assert signed.exit_code == 0, signed.output
    assert f"Analysed with the settings in {lab}" in signed.stderr
    out = run("show", "DEMO-0001", "-o", str(tmp_path / "show"), "--db", db)
    assert out.exit_code == 0, out.output
    stress = json.loads((tmp_path / "show" / "DEMO-0001.v1.record.json").read_text())["stress"]
    assert stress["heart_rate_formula"] == "tanaka"
    assert stress["age_predicted_max_hr_bpm"] == pytest.approx(208 - 0.7 * stress["age_years"])
    for _ in range(2):  # two wrong passwords lock the account under this lab's settings
        result = run(
            *("user", "unlock", "bob", "--db", db, "--as", "alice", "--password-stdin"),
            *("--settings", str(lab)),
            stdin="not it\n",
        )
        assert result.exit_code == 1 and "wrong password" in result.output, result.output
    locked = as_alice(db, "user", "unlock", "alice", "--settings", str(lab))
    assert locked.exit_code == 1 and "locked" in locked.output, locked.output
    broken = as_alice(db, "sign", "DEMO-0001", "--settings", str(tmp_path / "none.yaml"))
    assert broken.exit_code == 1 and "none.yaml" in broken.output, broken.output


def test_an_export_folder_holds_identified_outputs_or_an_extract_never_both(
    db: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # As for batch (issue 11, item 1): a de-identified export into a folder holding an identified
    # export (or the other way round) is refused before anything is written; before this check,
    # DEMO-0001.record.json stayed beside the extract.
    monkeypatch.setenv("SEGREPORT_DEID_KEY", "a test key of enough length")
    as_alice(db, "import", str(write_study(tmp_path / "in", study_data())))
    identified, extract = tmp_path / "identified", tmp_path / "extract"
    assert run("export", "-o", str(identified), "--db", db).exit_code == 0
    assert run("export", "-o", str(extract), "--deidentify", "--db", db).exit_code == 0
    for folder, flag, problem in (
        (identified, ("--deidentify",), "holds identified outputs"),
        (extract, (), "holds a de-identified extract"),
    ):
        before = {p: p.read_bytes() for p in folder.rglob("*") if p.is_file()}
        result = run("export", "-o", str(folder), *flag, "--db", db)
        assert result.exit_code == 1
        assert result.stderr.startswith(f"Error: {folder}: {problem}"), result.stderr
        after = {p: p.read_bytes() for p in folder.rglob("*") if p.is_file()}
        assert after == before  # nothing written
    # the same mode again is an ordinary re-export
    assert run("export", "-o", str(extract), "--deidentify", "--db", db).exit_code == 0
    assert not any("DEMO" in p.name for p in extract.iterdir())


def test_show_into_something_that_is_not_a_folder_is_a_located_error(
    db: str, tmp_path: Path
) -> None:
    # A FIFO (or a device) given as the output folder: the write fails at the first file, and the
    # clean-up of the files not yet written must not hide that error behind a traceback (it did:
    # NotADirectoryError while removing them). Common practice: one "Error:" line, exit 1.
    import os

    as_alice(db, "import", str(write_study(tmp_path / "in", study_data())))
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    result = run("show", "DEMO-0001", "-o", str(fifo), "--db", db)
    assert result.exit_code == 1
    assert result.stderr.startswith(f"Error: {fifo}/DEMO-0001.v1.study.json: cannot write")
    assert "Traceback" not in result.output


def test_password_stdin_from_an_endless_stream_is_refused_at_once(db: str) -> None:
    # --password-stdin < /dev/zero read one endless "line" until memory ran out (2 GB and more);
    # now at most one password's length is read (NIST SP 800-63B 5.1.1.2 allows a maximum).
    with open("/dev/zero", "rb") as zeros:
        done = subprocess.run(
            [
                *(sys.executable, "-m", "reporting", "store", "sign", "DEMO-0001", "--db", db),
                *("--as", "alice", "--password-stdin"),
            ],
            stdin=zeros,
            capture_output=True,
            text=True,
            timeout=60,
        )
    assert done.returncode == 1
    assert done.stderr.startswith(
        "Error: --password-stdin: the line for the password for alice is longer than 1,024 "
        "characters"
    ), done.stderr


def test_a_password_longer_than_the_limit_is_refused() -> None:
    from reporting.store.errors import StoreError
    from reporting.store.users import MAX_PASSWORD_CHARS, check_new_password

    check_new_password("p" * MAX_PASSWORD_CHARS, "password")
    with pytest.raises(StoreError, match="at most 1,024 characters"):
        check_new_password("p" * (MAX_PASSWORD_CHARS + 1), "password")


def test_an_export_that_cannot_finish_its_files_renames_none_of_them(
    db: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # A full disk surfaces when the last buffered rows are written. versions.csv is closed before
    # any aggregate takes its name, so a failure leaves no registry without it, and the user
    # gets one Error: line instead of a traceback (common practice: all or nothing).
    import errno

    from reporting.store import export

    as_alice(db, "import", str(write_study(tmp_path / "in", study_data())))

    def full(self: object) -> None:
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(export._VersionsFile, "close", full)
    out = tmp_path / "export"
    result = run("export", "-o", str(out), "--db", db)
    assert result.exit_code == 1
    assert result.stderr.startswith(f"Error: {out}: cannot write the export: No space left")
    # each study's record is whole in itself (written as it goes, as batch does); no aggregate is
    left = {p.name for p in out.iterdir()}
    assert left.isdisjoint({"registry.ndjson", "studies.csv", "segments.csv", "versions.csv"})
    assert not any(n.endswith(".part") for n in left) and "chain-head.txt" not in left


def test_an_amendment_reason_is_at_most_what_the_exports_carry(db: str, tmp_path: Path) -> None:
    # The reason travels in HL7, FHIR and DICOM (the release's limit, 2,000 characters, is the lab
    # page's): a longer one is refused when amending, not later as a failed export.
    path = write_study(tmp_path / "in", study_data())
    as_alice(db, "import", str(path))
    assert as_alice(db, "sign", "DEMO-0001").exit_code == 0
    result = as_alice(db, "amend", "DEMO-0001", str(path), "--reason", "r" * 2001)
    assert result.exit_code == 1
    assert "Error: --reason: is 2,001 characters; at most 2,000" in result.stderr


def test_an_export_sweeps_the_temporaries_of_one_killed_before(db: str, tmp_path: Path) -> None:
    # An export killed outright (kill -9) leaves its write_atomic temporaries; the next export into
    # the folder removes them under the folder's lock, as batch does.
    as_alice(db, "import", str(write_study(tmp_path / "in", study_data())))
    out = tmp_path / "export"
    assert run("export", "-o", str(out), "--db", db).exit_code == 0
    left = out / ".registry.ndjson.x1y2z3.part"
    left.write_text('{"half": ')
    assert run("export", "-o", str(out), "--db", db).exit_code == 0
    assert not left.exists()
