"""Worklist and open-study timings on a synthetic store of 100,000 studies: prints figures, asserts
nothing (not a test).

    python benchmarks/bench_worklist.py                    # SQLite, 100,000 studies
    python benchmarks/bench_worklist.py --count 20000 --db postgresql+psycopg://…

The rows are bulk-inserted, shaped as the store writes them (each version's content is a real,
valid study with its own id, patient and date; a third await a reader, a third are preliminary, a
third signed with a stand-in PDF; a quarter assigned to a reader). :func:`synthetic_store` is
reusable by other benchmarks. All studies are invented.
"""

from __future__ import annotations

import argparse
import copy
import datetime as dt
import random
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

PASSWORD = "benchmark password"
DEMO = Path(__file__).resolve().parent.parent / "reporting" / "data" / "demo" / "DEMO-0001.yaml"


def synthetic_store(url: str, count: int, *, seed: int = 15) -> Any:
    """A new store at ``url`` holding ``count`` studies (see the module docstring); its Database."""
    import yaml
    from sqlalchemy import insert

    from reporting.analysis import analyze
    from reporting.export.record import record_json
    from reporting.load import study_from_data
    from reporting.store import service
    from reporting.store.canonical import Origin, canonical_json, sha256_hex
    from reporting.store.schema import (
        AssignmentRow,
        SignatureRow,
        StudyRow,
        VersionRow,
        WorklistRow,
    )

    db = service.init_store(url, "bench", full_name=None, password=PASSWORD, origin=Origin.CLI)
    demo = study_from_data(yaml.safe_load(DEMO.read_text(encoding="utf-8")), source="demo")
    template = demo.model_dump(mode="json", exclude_none=True)
    # one real signed record stands in for every signed study (its prior-study comparisons run)
    record = record_json(analyze(demo)).encode()
    rng = random.Random(seed)
    patients = max(1, count // 4)
    chunk = 5000
    with db.write() as session:
        for start in range(0, count, chunk):
            ids = range(start + 1, min(count, start + chunk) + 1)
            studies, versions, signatures, worklist, assignments = [], [], [], [], []
            for i in ids:
                sid, patient = f"W-{i:07d}", f"P{i % patients:06d}"
                date = (dt.date(2015, 1, 1) + dt.timedelta(days=rng.randint(0, 4000))).isoformat()
                study = copy.deepcopy(template)
                study["study"].update(id=sid, date=date)
                study["study"].pop("report_status", None)
                study["patient"]["id"] = patient
                data = canonical_json({"format": 1, "study": study, "files": {}})
                kind = i % 3  # 0 awaiting a reader, 1 preliminary, 2 signed
                created = f"{date}T09:00:00.000000+00:00"
                studies.append(
                    {"id": i, "study_id": sid, "patient_id": patient, "created_at": created}
                )
                versions.append(
                    {
                        "id": i,
                        "study_pk": i,
                        "version": 1,
                        "status": "preliminary",
                        "author": "bench",
                        "created_at": created,
                        "reason": "imported",
                        "content": data,
                        "content_sha256": sha256_hex(data),
                        "study_date": date,
                        "awaiting_reader": kind == 0,
                    }
                )
                if kind == 2:
                    signatures.append(
                        {
                            "version_pk": i,
                            "signer": "bench",
                            "signer_name": "B",
                            "signed_at": created,
                            "meaning": "m",
                            "record_json": record,
                            "record_sha256": "0" * 64,
                            "pdf": b"%PDF-stand-in",
                            "pdf_sha256": "0" * 64,
                            "chain_head": "0" * 64,
                        }
                    )
                worklist.append(
                    {
                        "study_pk": i,
                        "status": ("unread", "preliminary", "signed")[kind],
                        "version": 1,
                        "author": "bench",
                        "updated_at": created,
                        "study_date": date,
                        "awaiting_reader": kind == 0,
                        "assigned_reader": "bench" if i % 4 == 0 else None,
                    }
                )
                if i % 4 == 0:
                    assignments.append(
                        {
                            "study_pk": i,
                            "reader": "bench",
                            "assigned_by": "bench",
                            "assigned_at": created,
                        }
                    )
            session.execute(insert(StudyRow), studies)
            session.execute(insert(VersionRow), versions)
            if signatures:
                session.execute(insert(SignatureRow), signatures)
            session.execute(insert(WorklistRow), worklist)
            if assignments:
                session.execute(insert(AssignmentRow), assignments)
    return db


def _median_ms(run: Any, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        run()
        times.append((time.perf_counter() - t0) * 1000)
    return statistics.median(times)


def _http(db: Any, count: int, repeats: int) -> None:
    """The same through the lab app's routes, in-process (a signed-in reader's requests)."""
    from fastapi.testclient import TestClient

    from reporting.settings import default_settings
    from reporting.web.lab import create_lab_app

    client = TestClient(
        create_lab_app(db, settings=default_settings()), base_url="http://127.0.0.1"
    )
    answer = client.post("/api/session", json={"user": "bench", "password": PASSWORD})
    assert answer.status_code == 200, answer.text
    for name, params in (
        ("GET /api/worklist (first page)", {}),
        ("GET /api/worklist?status=unread", {"status": "unread"}),
    ):
        ms = _median_ms(lambda p=params: client.get("/api/worklist", params=p), repeats)
        print(f"{name}: {ms:.1f} ms median")
    pick = random.Random(2)
    ids = iter([f"W-{pick.randint(1, count):07d}" for _ in range(repeats)])
    ms = _median_ms(lambda: client.get(f"/api/studies/{next(ids)}"), repeats)
    print(f"GET /api/studies/{{id}} (view with earlier studies and comparison): {ms:.1f} ms median")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--count", type=int, default=100_000)
    parser.add_argument("--db", help="a PostgreSQL URL (default: a SQLite file in a temp folder)")
    parser.add_argument("--repeats", type=int, default=30)
    parser.add_argument("--reuse", help="a SQLite file: build it once, then reuse it")
    args = parser.parse_args(argv)

    from reporting.store import saving, worklist
    from reporting.store.worklist import Query, WorklistStatus

    with tempfile.TemporaryDirectory(prefix="bench-worklist-") as folder:
        url = args.db or args.reuse or str(Path(folder) / "worklist.db")
        if args.reuse and Path(args.reuse).exists():
            from reporting.store import service

            db = service.open_store(args.reuse)
        else:
            t0 = time.perf_counter()
            db = synthetic_store(url, args.count)
            print(f"built {args.count} studies in {time.perf_counter() - t0:.1f} s ({db.dialect})")
        cases = {
            "first page, no filter": Query(),
            "unread, first page": Query(status=WorklistStatus.UNREAD),
            "signed, page 100": Query(status=WorklistStatus.SIGNED, offset=5000),
            "assigned reader": Query(reader="bench"),
            "one patient": Query(patient="P000123"),
            "one month": Query(date_from=dt.date(2020, 3, 1), date_to=dt.date(2020, 3, 31)),
        }
        for name, query in cases.items():
            total = worklist.listing(db, query)[0]
            ms = _median_ms(lambda q=query: worklist.listing(db, q), args.repeats)
            print(f"worklist {name}: {ms:.1f} ms median ({total} matching)")
        pick = random.Random(1)
        it = iter([f"W-{pick.randint(1, args.count):07d}" for _ in range(args.repeats)])
        ms = _median_ms(lambda: saving.read(db, next(it)), args.repeats)
        print(f"open one study (latest version, parsed): {ms:.1f} ms median")
        _http(db, args.count, args.repeats)
        db.dispose()


if __name__ == "__main__":
    sys.exit(main())
