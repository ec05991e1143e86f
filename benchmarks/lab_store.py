"""The benchmark store of bench_lab_page.py: 100,000 studies, built once and cached.

How the rows are made (printed by the benchmark, so nobody mistakes them for imported studies):

- the store is created by the real code (``service.init_store``), and so are the readers
  (``users.create``, argon2 hashes);
- the invented demo studies DEMO-0001…DEMO-0006 are imported by the real import code
  (``versions.import_files``) and DEMO-0001…0005 signed by the real signing code (record + PDF);
- every other study is bulk-inserted with SQLAlchemy Core: its content is the canonical content of
  one of DEMO-0001…0005 with the study id, date and patient id changed (so the content SHA-256 is
  that of the stored bytes), one version each, with the import event the real code would write;
  most are signed: the signature row holds the template's real signed record with the ids changed
  (hashed as stored) but a short stand-in instead of a rendered PDF, and its sign event. The audit
  chain links every event, so ``segreport store verify`` passes on the built store.

Patients: about 60 % have one study, the rest two to six at distinct dates, so opening a study
finds earlier ones and a prior signed study. The newest 5 % of studies are unsigned (half of those
"awaiting reader" when the store has that column). The file is cached under
``$XDG_CACHE_HOME/segreport-bench`` keyed by the code that shapes the rows (migrations, table
models, content format, the demo studies and this file), so a rerun with the same code reuses it;
``--rebuild`` builds it again after other changes (e.g. to the facts an audit event carries;
``segreport store verify`` on the file tells).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import random
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "reporting" / "data" / "demo"
ADMIN = "bench-admin"
PASSWORD = "benchmark password"
READER = "reader{:02d}"
TEMPLATES = ("DEMO-0001", "DEMO-0002", "DEMO-0003", "DEMO-0004", "DEMO-0005")
BULK_ID = "B-{:07d}"
BULK_PATIENT = "BP-{:06d}"
UNSIGNED_SHARE = 0.05
STAND_IN_PDF = b"%PDF-1.4\n% benchmark stand-in: a bulk-inserted row, no PDF was rendered\n%%EOF\n"
CHUNK = 5000
FIRST_DAY = dt.date(2015, 1, 1)
DAYS = 4300
KEY_FILES = (
    "reporting/store/schema.py",
    "reporting/store/content.py",
    "reporting/store/canonical.py",
)


def code_key(count: int, readers: int) -> str:
    """A digest of the code and data that shape the built store's rows."""
    digest = hashlib.sha256(f"{count}:{readers}".encode())
    paths = [ROOT / p for p in KEY_FILES]
    paths += sorted((ROOT / "reporting" / "store" / "migrations" / "versions").glob("*.py"))
    paths += [*sorted(DEMO.iterdir()), Path(__file__).resolve()]
    for path in paths:
        digest.update(path.name.encode() + b"\0" + path.read_bytes())
    return digest.hexdigest()[:16]


def cache_dir() -> Path:
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "segreport-bench"


@dataclass(frozen=True)
class Built:
    """What the benchmark needs to know about a store."""

    url: str
    studies: int
    readers: tuple[str, ...]
    build_seconds: float | None  # None: reused from the cache
    how: str


def _patients(count: int, rng: random.Random) -> Iterator[int]:
    """Studies per patient: about 60 % one, then two to six."""
    made = 0
    while made < count:
        n = 1 if rng.random() < 0.6 else rng.choice((2, 2, 2, 3, 3, 4, 5, 6))
        n = min(n, count - made)
        made += n
        yield n


def _plan(count: int, rng: random.Random) -> list[tuple[str, str, str, str]]:
    """(study id, patient id, date, template) for each bulk study, oldest first."""
    rows = []
    for patient, n in enumerate(_patients(count, rng), start=1):
        days = sorted(rng.sample(range(DAYS), n))
        for day in days:
            date = (FIRST_DAY + dt.timedelta(days=day)).isoformat()
            rows.append((BULK_PATIENT.format(patient), date, rng.choice(TEMPLATES)))
    rng.shuffle(rows)  # study numbers do not follow the patient
    numbered = [(BULK_ID.format(i), p, d, t) for i, (p, d, t) in enumerate(rows, start=1)]
    numbered.sort(key=lambda r: (r[2], r[0]))
    return numbered


SID, PID, DATE, YEAR = "@@sid@@", "@@pid@@", "@@date@@", "@@year@@"


def _template(value: dict[str, Any], study_key: str) -> bytes:
    """Canonical bytes of ``value`` with place-holders for the ids and date (keys keep their order,
    so replacing a place-holder gives exactly the canonical bytes of the changed value)."""
    from reporting.store.canonical import canonical_json

    value = json.loads(json.dumps(value))
    study = value[study_key] if study_key else value
    study["study"]["id"] = SID
    study["study"]["date"] = DATE
    if "year" in study["study"]:
        study["study"]["year"] = YEAR
    study.setdefault("patient", {})["id"] = PID
    return canonical_json(value)


def _fill(template: bytes, study_id: str, patient_id: str, date: str) -> bytes:
    return (
        template.replace(f'"{YEAR}"'.encode(), date[:4].encode())
        .replace(SID.encode(), study_id.encode())
        .replace(PID.encode(), patient_id.encode())
        .replace(DATE.encode(), date.encode())
    )


def _listed(row: dict[str, Any], sig: dict[str, Any] | None) -> dict[str, Any]:
    """The worklist row the store keeps for a study whose latest version is ``row``."""
    from reporting.store import worklist  # type: ignore[attr-defined, unused-ignore]

    awaiting = bool(row.get("awaiting_reader"))
    status = worklist.status_of(row["status"], signed=sig is not None, awaiting_reader=awaiting)
    return {
        "study_pk": row["study_pk"],
        "status": status.value,
        "version": row["version"],
        "author": row["author"],
        "updated_at": sig["signed_at"] if sig is not None else row["created_at"],
        "study_date": row["study_date"],
        "awaiting_reader": awaiting and sig is None,
    }


def build(url: str, count: int, readers: int, *, seed: int = 15, log: Any = print) -> float:
    """Create the store at ``url`` (which must not hold one); return the seconds it took."""
    from sqlalchemy import func, insert, select

    from reporting.store import audit, service, signing, users, versions
    from reporting.store.canonical import Origin, canonical_json, host, sha256_hex
    from reporting.store.schema import Base, EventRow, SignatureRow, StudyRow, VersionRow

    t0 = time.perf_counter()
    db = service.init_store(
        url, ADMIN, full_name="Benchmark admin", password=PASSWORD, origin=Origin.CLI
    )
    try:
        with db.write() as session:
            for i in range(1, readers + 1):
                users.create(
                    session,
                    READER.format(i),
                    full_name=f"Benchmark reader {i}",
                    roles=(users.Role.READER,),
                    password=PASSWORD,
                    temporary=False,
                    actor=ADMIN,
                    origin=Origin.CLI,
                )
        who = users.authenticate(db, READER.format(1), PASSWORD, origin=Origin.CLI)
        versions.import_files(db, sorted(DEMO.glob("*.yaml")), who, origin=Origin.CLI)
        for name in TEMPLATES:
            signing.sign(db, name, who, origin=Origin.CLI)
        log(
            f"  demo studies imported and signed by the real code: {time.perf_counter() - t0:.1f} s"
        )
        templates: dict[str, tuple[bytes, bytes]] = {}
        with db.read() as session:
            for name in TEMPLATES:
                _, row = versions.get_version(session, name, None)
                sig = versions.signature_of(session, row)
                assert sig is not None
                templates[name] = (
                    _template(json.loads(row.content), "study"),
                    _template(json.loads(sig.record_json), ""),
                )
            last = audit.last_event(session)
            assert last is not None
            seq, head = last.seq, last.hash
            next_pk = (
                session.scalar(select(func.max(StudyRow.id))) or 0,
                session.scalar(select(func.max(VersionRow.id))) or 0,
            )
        plan = _plan(count - len(list(DEMO.glob("*.yaml"))), random.Random(seed))
        version_columns = set(VersionRow.__table__.c.keys())
        unsigned_from = int(len(plan) * (1 - UNSIGNED_SHARE))
        rng = random.Random(seed + 1)
        worklist_table = Base.metadata.tables.get("worklist")  # from #15 on: kept by every append
        the_host = host()

        def event(
            action: str, actor: str, at: str, sid: str, detail: dict[str, Any]
        ) -> dict[str, Any]:
            nonlocal seq, head
            seq += 1
            fields = {
                "seq": seq,
                "at": at,
                "actor": actor,
                "action": action,
                "study_id": sid,
                "version": 1,
                "origin": Origin.CLI.value,
                "host": the_host,
                "detail": detail,
                "prev_hash": head,
            }
            body = canonical_json(fields)
            row = {
                k: fields[k]
                for k in (
                    "seq",
                    "at",
                    "actor",
                    "action",
                    "study_id",
                    "version",
                    "origin",
                    "host",
                    "prev_hash",
                )
            }
            head = sha256_hex(body)
            return row | {"body": body, "hash": head}

        study_pk, version_pk = next_pk
        for start in range(0, len(plan), CHUNK):
            studies, rows, sigs, events, lists = [], [], [], [], []
            for k, (sid, pid, date, name) in enumerate(plan[start : start + CHUNK], start=start):
                study_pk += 1
                version_pk += 1
                reader = READER.format(rng.randint(1, readers))
                value, record = templates[name]
                data = _fill(value, sid, pid, date)
                if k == start:  # the place-holders gave exactly the canonical bytes
                    assert canonical_json(json.loads(data)) == data
                made = f"{date}T10:00:00.000000+00:00"
                studies.append(
                    {"id": study_pk, "study_id": sid, "patient_id": pid, "created_at": made}
                )
                row: dict[str, Any] = {
                    "id": version_pk,
                    "study_pk": study_pk,
                    "version": 1,
                    "parent_version": None,
                    "status": "preliminary",
                    "author": reader,
                    "created_at": made,
                    "reason": "imported",
                    "content": data,
                    "content_sha256": sha256_hex(data),
                    "study_date": date,
                }
                if "awaiting_reader" in version_columns:
                    row["awaiting_reader"] = k >= unsigned_from and k % 2 == 0
                rows.append(row)
                events.append(
                    event(
                        "import",
                        reader,
                        made,
                        sid,
                        versions.version_facts(SimpleNamespace(**row), sid),
                    )
                )  # type: ignore[arg-type]
                if k >= unsigned_from:
                    if worklist_table is not None:
                        lists.append(_listed(row, None))
                    continue
                record_bytes = _fill(record, sid, pid, date)
                sig = {
                    "version_pk": version_pk,
                    "signer": reader,
                    "signer_name": f"Benchmark reader {reader[-2:].lstrip('0')}",
                    "signed_at": f"{date}T16:00:00.000000+00:00",
                    "meaning": signing.DEFAULT_MEANING,
                    "record_json": record_bytes,
                    "record_sha256": sha256_hex(record_bytes),
                    "pdf": STAND_IN_PDF,
                    "pdf_sha256": sha256_hex(STAND_IN_PDF),
                    "chain_head": head,
                }
                sigs.append(sig)
                facts = versions.signature_facts(SimpleNamespace(**sig), SimpleNamespace(**row))  # type: ignore[arg-type]
                events.append(event("sign", reader, sig["signed_at"], sid, facts))
                if worklist_table is not None:
                    lists.append(_listed(row, sig))
            with db.write() as session:
                session.execute(insert(StudyRow), studies)
                session.execute(insert(VersionRow), rows)
                if sigs:
                    session.execute(insert(SignatureRow), sigs)
                session.execute(insert(EventRow), events)
                if worklist_table is not None:
                    session.execute(insert(worklist_table), lists)
        if db.dialect == "sqlite":  # the write-ahead log checkpointed, as a store at rest
            with db.connect() as conn:
                conn.exec_driver_sql("PRAGMA wal_checkpoint(TRUNCATE)")
    finally:
        db.dispose()
    return time.perf_counter() - t0


HOW = (
    "{demo} demo studies imported and 5 signed by the real code; {bulk} bulk-inserted with "
    "SQLAlchemy Core as valid versions (demo content with ids changed, content SHA-256 of the stored "
    "bytes, import/sign events on the audit chain; signed rows carry the demo's signed record with "
    "ids changed and a stand-in instead of a rendered PDF); {unsigned:.0%} newest unsigned"
)


def ensure(
    db: str | None, count: int, readers: int, *, rebuild: bool = False, log: Any = print
) -> Built:
    """The benchmark store: the cached SQLite file (built when missing) or ``db`` (a URL)."""
    demo = len(list(DEMO.glob("*.yaml")))
    how = HOW.format(demo=demo, bulk=count - demo, unsigned=UNSIGNED_SHARE)
    names = tuple(READER.format(i) for i in range(1, readers + 1))
    if db is None:
        key = code_key(count, readers)
        path = cache_dir() / f"lab-{count}-{key}.db"
        if path.exists() and not rebuild:
            return Built(str(path), count, names, None, how)
        path.parent.mkdir(parents=True, exist_ok=True)
        for old in path.parent.glob(f"lab-{count}-*.db*"):
            old.unlink()  # an older code version's store
        partial = path.with_name(path.name + ".building")
        for leftover in path.parent.glob(partial.name + "*"):
            leftover.unlink()
        seconds = build(str(partial), count, readers, log=log)
        partial.rename(path)
        return Built(str(path), count, names, seconds, how)
    return Built(db, count, names, _build_or_reuse(db, count, readers, rebuild, log), how)


def _build_or_reuse(url: str, count: int, readers: int, rebuild: bool, log: Any) -> float | None:
    """A PostgreSQL (or any URL) store: reuse it when it already holds the benchmark rows."""
    from sqlalchemy import func, select

    from reporting.store import engine, service
    from reporting.store.errors import StoreError
    from reporting.store.schema import StudyRow, User

    try:
        db = service.open_store(url)
    except StoreError:
        db = None
    if db is not None:
        with db.read() as session:
            have = session.scalar(select(func.count()).select_from(StudyRow))
            admin = session.scalar(select(User.full_name).where(User.name == ADMIN))
        db.dispose()
        if have == count and admin is not None and not rebuild:
            return None
        raise SystemExit(
            f"{engine.shown(engine.resolve_url(url))} holds another store ({have} studies); "
            "give an empty database (drop and create it) to build the benchmark store there"
        )
    return build(url, count, readers, log=log)
