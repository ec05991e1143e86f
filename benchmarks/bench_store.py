"""Report-store timings: prints figures, asserts nothing (not a test).

    python benchmarks/bench_store.py                  # all three, defaults below
    python benchmarks/bench_store.py --import-count 500 --lookup-count 20000

Targets (issue 14), ratios from medians measured in one run:
- importing 2,000 studies ≤ 1.5× ``segreport batch --no-pdf --jobs 1`` on the same files (both whole
  commands in a fresh process; the import includes one argon2 password check), memory flat;
- history and prior-study lookup ≤ 5 ms median with 100,000 studies stored (SQLite); the rows are
  bulk-inserted for speed, shaped as the store writes them;
- signing without the password check ≤ 1.5× one report (analysis + record + maps + PDF) of the
  same study, both in-process.
All studies are invented (the generator of benchmarks/bench_batch.py).
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import random
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from bench_batch import write_studies

PASSWORD = "benchmark password"


LAST_RSS_MB = [0.0]


def _run(command: list[str], stdin: str = "") -> float:
    """Run one command; return its wall time (its own peak RSS goes to LAST_RSS_MB)."""
    t0 = time.perf_counter()
    with tempfile.TemporaryFile() as err:
        proc = subprocess.Popen(
            command, stdin=subprocess.PIPE, stdout=subprocess.DEVNULL, stderr=err
        )
        assert proc.stdin is not None
        proc.stdin.write(stdin.encode())
        proc.stdin.close()
        _, status, usage = os.wait4(proc.pid, 0)
        proc.returncode = os.waitstatus_to_exitcode(status)
        if proc.returncode != 0:
            err.seek(0)
            raise SystemExit(f"{' '.join(command[:5])} failed:\n{err.read().decode()[-2000:]}")
    LAST_RSS_MB[0] = usage.ru_maxrss / 1024
    return time.perf_counter() - t0


def _init(db: Path) -> None:
    _run(
        [
            sys.executable,
            "-m",
            "reporting",
            "store",
            "init",
            "--db",
            str(db),
            "--admin",
            "bench",
            "--password-stdin",
        ],
        PASSWORD + "\n",
    )


def _import(indir: Path, db: Path) -> float:
    files = sorted(str(p) for p in indir.glob("*.yaml"))
    command = [
        sys.executable,
        "-m",
        "reporting",
        "store",
        "import",
        *files,
        "--db",
        str(db),
        "--as",
        "bench",
        "--password-stdin",
    ]
    return _run(command, PASSWORD + "\n")


def bench_import(count: int, repeats: int, root: Path) -> None:
    indir = write_studies(root / f"in-{count}", count, "yaml")
    batch, store = [], []
    for r in range(repeats):
        batch.append(
            _run(
                [
                    sys.executable,
                    "-m",
                    "reporting",
                    "batch",
                    str(indir),
                    "-o",
                    str(root / f"b{r}"),
                    "--no-pdf",
                    "--jobs",
                    "1",
                    "-q",
                ]
            )
        )
        db = root / f"import-{r}.db"
        _init(db)
        store.append(_import(indir, db))
    b, s = statistics.median(batch), statistics.median(store)
    print(
        f"import {count} studies: store import {s:.2f} s, batch --no-pdf --jobs 1 {b:.2f} s, ratio {s / b:.2f} (target ≤ 1.5)"
    )
    rss_full = LAST_RSS_MB[0]
    small = write_studies(root / "in-small", count // 4, "yaml")
    db = root / "small.db"
    _init(db)
    _import(small, db)
    print(
        f"import peak RSS: {LAST_RSS_MB[0]:.0f} MB for {count // 4} studies, {rss_full:.0f} MB for {count}"
    )


def bench_lookup(count: int, root: Path) -> None:
    from sqlalchemy import insert, text

    from reporting.store import history, service
    from reporting.store.canonical import Origin, canonical_json, sha256_hex
    from reporting.store.schema import EventRow, SignatureRow, StudyRow, VersionRow

    db = service.init_store(
        str(root / "lookup.db"), "bench", full_name=None, password=PASSWORD, origin=Origin.CLI
    )
    rng = random.Random(14)
    patients = max(1, count // 4)
    t0 = time.perf_counter()
    with db.write() as session:
        chunk = 5000
        for start in range(0, count, chunk):
            ids = range(start + 1, min(count, start + chunk) + 1)
            session.execute(
                insert(StudyRow),
                [
                    {
                        "id": i,
                        "study_id": f"L-{i:07d}",
                        "patient_id": f"P{i % patients:06d}",
                        "created_at": "t",
                    }
                    for i in ids
                ],
            )
            rows = []
            for i in ids:
                content = canonical_json({"study": {"study": {"id": f"L-{i:07d}"}}, "n": i})
                date = dt.date(2015, 1, 1) + dt.timedelta(days=rng.randint(0, 4000))
                rows.append(
                    {
                        "id": i,
                        "study_pk": i,
                        "version": 1,
                        "status": "preliminary",
                        "author": "bench",
                        "created_at": "t",
                        "reason": "imported",
                        "content": content,
                        "content_sha256": sha256_hex(content),
                        "study_date": date.isoformat(),
                    }
                )
            session.execute(insert(VersionRow), rows)
            session.execute(
                insert(SignatureRow),
                [
                    {
                        "version_pk": i,
                        "signer": "bench",
                        "signer_name": "B",
                        "signed_at": "t",
                        "meaning": "m",
                        "record_json": b"{}",
                        "record_sha256": "0" * 64,
                        "pdf": b"%PDF-stand-in",
                        "pdf_sha256": "0" * 64,
                        "chain_head": "0" * 64,
                    }
                    for i in ids
                    if i % 3
                ],
            )
            session.execute(
                insert(EventRow),
                [
                    {
                        "seq": 10 + 2 * i + k,
                        "at": "t",
                        "actor": "bench",
                        "action": a,
                        "study_id": f"L-{i:07d}",
                        "version": 1,
                        "origin": "cli",
                        "host": "h",
                        "body": b"{}",
                        "prev_hash": "0" * 64,
                        "hash": f"{2 * i + k:064x}",
                    }
                    for i in ids
                    for k, a in enumerate(("import", "sign"))
                ],
            )
    with db.read() as session:  # the steady state: the bulk insert's write-ahead log checkpointed
        session.execute(text("PRAGMA wal_checkpoint(TRUNCATE)"))
    print(f"lookup store: {count} studies bulk-inserted in {time.perf_counter() - t0:.1f} s")
    sample = [rng.randint(1, count) for _ in range(300)]
    hist, prior = [], []
    for i in sample:
        t = time.perf_counter()
        history.history(db, f"L-{i:07d}")
        hist.append(time.perf_counter() - t)
        t = time.perf_counter()
        history.prior_for(db, f"L-{i:07d}")
        prior.append(time.perf_counter() - t)
    print(
        f"history median {statistics.median(hist) * 1000:.2f} ms, prior lookup median {statistics.median(prior) * 1000:.2f} ms with {count} studies (target ≤ 5 ms)"
    )
    db.dispose()


def bench_sign(repeats: int, root: Path) -> None:
    import yaml

    from reporting.analysis import analyze_file
    from reporting.render import write_report
    from reporting.store import service, signing, users, versions
    from reporting.store.canonical import Origin

    demo = Path(__file__).resolve().parent.parent / "reporting" / "data" / "demo" / "DEMO-0002.yaml"
    folder = root / "sign-in"
    folder.mkdir()
    paths = []
    for i in range(repeats):
        data = yaml.safe_load(demo.read_text())
        data["study"]["id"] = f"SIGN-{i:03d}"
        path = folder / f"SIGN-{i:03d}.yaml"
        path.write_text(yaml.safe_dump(data, sort_keys=False))
        paths.append(path)
    db = service.init_store(
        str(root / "sign.db"), "bench", full_name="Dr Bench", password=PASSWORD, origin=Origin.CLI
    )
    who = users.authenticate(db, "bench", PASSWORD, origin=Origin.CLI)
    versions.import_files(db, paths, who, origin=Origin.CLI)
    report, sign = [], []
    write_report(analyze_file(paths[0]), root / "warm")  # fonts and templates loaded once, for both
    for i, path in enumerate(paths):
        t = time.perf_counter()
        write_report(analyze_file(path), root / f"report-{i}")
        report.append(time.perf_counter() - t)
        t = time.perf_counter()
        signing.sign(db, f"SIGN-{i:03d}", who, origin=Origin.CLI)
        sign.append(time.perf_counter() - t)
    r, s = statistics.median(report), statistics.median(sign)
    print(
        f"signing {s * 1000:.0f} ms vs one report {r * 1000:.0f} ms (median of {repeats}), ratio {s / r:.2f} (target ≤ 1.5; password check excluded)"
    )
    db.dispose()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--import-count", type=int, default=2000)
    parser.add_argument("--lookup-count", type=int, default=100_000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--sign-repeats", type=int, default=15)
    parser.add_argument("--only", choices=["import", "lookup", "sign"])
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="bench-store-") as folder:
        root = Path(folder)
        if args.only in (None, "sign"):
            bench_sign(args.sign_repeats, root)
        if args.only in (None, "lookup"):
            bench_lookup(args.lookup_count, root)
        if args.only in (None, "import"):
            bench_import(args.import_count, args.repeats, root)


if __name__ == "__main__":
    main()
