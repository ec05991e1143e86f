"""The lab page's server under open-loop load: prints figures, asserts nothing (not a test).

    python benchmarks/bench_lab_page.py                        # SQLite store, 2 runs of 60 s
    python benchmarks/bench_lab_page.py --seconds 20 --runs 1  # quicker
    python benchmarks/bench_lab_page.py --db postgresql://bench@/segreport_bench   # a PostgreSQL store
    python benchmarks/bench_lab_page.py --profile server.txt   # and a run sampled by py-spy

Target (issue 15): 20 signed-in readers send live analyses (``POST /api/analyze`` with a study
body, as the page does on every score change) and open studies (``GET /api/studies/{id}``, a
random one of 100,000 stored) as Poisson arrivals at 40 requests/s in all; the median and p95
latency of both routes, p95 ≤ 100 ms for both on this machine.

Three processes: this one builds (or reuses) the store and starts ``python -m reporting serve --db
URL`` as the second; the load comes from a third (benchmarks/lab_load.py: asyncio + httpx, one
client and session cookie per user, requests sent on schedule whatever the answers, latency from
the scheduled time so queueing counts). How the 100,000 studies were made is printed (see
benchmarks/lab_store.py: a few real imports, the rest bulk-inserted valid versions); the SQLite
store is cached between runs, keyed by the code that shapes its rows.

PostgreSQL: give an empty database, e.g. as the postgres user
``createuser bench && createdb -O bench segreport_bench``, then ``--db postgresql://bench@/segreport_bench``
(a socket connection; add ``:password@host`` as needed). The first run builds the store there
(several minutes), later runs reuse it; drop and re-create the database after a code change.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.request
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))  # this checkout's reporting
sys.path.insert(0, str(Path(__file__).parent))
import lab_store
from lab_load import ANALYZE, OPEN

ROOT = Path(__file__).resolve().parent.parent
TARGET_P95_MS = 100.0
BODIES = 200


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port: int = sock.getsockname()[1]
        return port


def plan(url: str, built: lab_store.Built, folder: Path) -> Path:
    """The load's plan file: users, password, every study id, and bodies to analyse.

    The bodies are studies as GET /api/studies/{id} gives them to the page (the stored study
    JSON), taken from the latest studies of patients with earlier signed ones, so the live
    analysis also meets the comparison with the prior study.
    """
    from sqlalchemy import func, select

    from reporting.store import content, service
    from reporting.store.schema import StudyRow, VersionRow

    db = service.open_store(url)
    with db.read() as session:
        ids = list(session.scalars(select(StudyRow.study_id)))
        several = (
            select(StudyRow.patient_id)
            .group_by(StudyRow.patient_id)
            .having(func.count() > 1)
            .limit(BODIES * 5)
            .subquery()
        )
        rows = session.execute(
            select(StudyRow.patient_id, VersionRow.study_date, VersionRow.content)
            .join(VersionRow, VersionRow.study_pk == StudyRow.id)
            .where(StudyRow.patient_id.in_(select(several.c.patient_id)))
        ).all()
    db.dispose()
    latest: dict[str, tuple[str, bytes]] = {}
    for patient, date, data in rows:
        if patient not in latest or date > latest[patient][0]:
            latest[patient] = (date, data)
    bodies = []
    for _, data in sorted(latest.values())[-BODIES:]:
        study = json.loads(content.parse(bytes(data)).study.model_dump_json(exclude_none=True))
        bodies.append(study)
    path = folder / "plan.json"
    path.write_text(
        json.dumps(
            {
                "users": list(built.readers),
                "password": lab_store.PASSWORD,
                "study_ids": ids,
                "bodies": bodies,
            }
        )
    )
    print(f"plan: {len(ids)} study ids to open, {len(bodies)} study bodies to analyse")
    return path


def start_server(url: str, port: int, log: Path) -> subprocess.Popen[bytes]:
    command = [sys.executable, "-m", "reporting", "serve", "--db", url, "--port", str(port)]
    server = subprocess.Popen(
        command, cwd=ROOT, stdout=log.open("wb"), stderr=subprocess.STDOUT, start_new_session=True
    )
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if server.poll() is not None:
            raise SystemExit(f"the server stopped:\n{log.read_text()[-3000:]}")
        try:
            urllib.request.urlopen(f"http://127.0.0.1:{port}/api/session", timeout=2)
        except urllib.error.HTTPError:
            return server  # it answers (401 without a session)
        except OSError:
            time.sleep(0.3)
        else:
            return server
    server.terminate()
    raise SystemExit(f"the server did not answer within 60 s:\n{log.read_text()[-3000:]}")


def profile(pid: int, out: Path) -> subprocess.Popen[bytes] | None:
    """Sample the server with py-spy until interrupted (collapsed stacks in ``out``)."""
    spy = shutil.which("py-spy")
    if spy is None:
        print("py-spy is not installed: no profile (python3 -m pip install py-spy)")
        return None
    command = [spy, "record", "--pid", str(pid), "--rate", "100", "--format", "raw"]
    command += ["--output", str(out), "--nonblocking"]
    return subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


IDLE = ("EpollSelector.select", "Queue.get", "Condition.wait")
"""Frames of a thread waiting for work: such samples are left out."""


def cpu_seconds(pid: int) -> float:
    """User + system CPU time of process ``pid`` so far (all its threads; Linux /proc)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def top_frames(raw: Path, count: int = 30) -> list[tuple[float, str]]:
    """Share of busy samples per function of this project (on the stack: inclusive)."""
    inclusive: dict[str, int] = {}
    total = 0
    for line in raw.read_text().splitlines():
        stack, _, n = line.rpartition(" ")
        frames = stack.split(";")
        if any(idle in frame for frame in frames[-3:] for idle in IDLE):
            continue
        samples = int(n)
        total += samples
        for frame in set(frames):
            if "reporting/" in frame and "__main__" not in frame and "cli.py" not in frame:
                inclusive[frame] = inclusive.get(frame, 0) + samples
    ranked = sorted(inclusive.items(), key=lambda kv: -kv[1])[:count]
    return [(n / max(total, 1), frame) for frame, n in ranked]


def load(
    port: int, plan_path: Path, args: argparse.Namespace, run: int, server: int
) -> tuple[dict[str, Any], float, float]:
    """Run the load process; also the server's CPU seconds and the wall time after sign-in."""
    command = [sys.executable, str(Path(__file__).parent / "lab_load.py")]
    command += ["--url", f"http://127.0.0.1:{port}", "--plan", str(plan_path)]
    command += ["--rate", str(args.rate), "--seconds", str(args.seconds)]
    command += ["--warmup", str(args.warmup), "--open-share", str(args.open_share)]
    command += ["--seed", str(args.seed + run)]
    with tempfile.TemporaryFile("w+") as out:
        proc = subprocess.Popen(command, stdout=out, stderr=subprocess.PIPE, text=True)
        assert proc.stderr is not None
        line = proc.stderr.readline()  # "signed in": the load starts, argon2 checks are over
        cpu, wall = cpu_seconds(server), time.monotonic()
        errors = line + proc.stderr.read()
        proc.wait()
        cpu, wall = cpu_seconds(server) - cpu, time.monotonic() - wall
        if proc.returncode != 0:
            raise SystemExit(f"the load process failed:\n{errors[-3000:]}")
        out.seek(0)
        result: dict[str, Any] = json.loads(out.read())
    return result, cpu, wall


def show(result: dict[str, Any], loads: tuple[float, float]) -> bool:
    met = True
    for route in (ANALYZE, OPEN):
        r = result["routes"][route]
        ok = r["p95_ms"] <= TARGET_P95_MS and not r["errors"]
        met &= ok
        errors = ", ".join(f"{k}: {v}" for k, v in r["errors"].items()) or "none"
        print(
            f"  {route:24} {r['achieved_per_s']:5.1f}/s  median {r['median_ms']:6.1f} ms  "
            f"p95 {r['p95_ms']:6.1f} ms  p99 {r['p99_ms']:6.1f} ms  max {r['max_ms']:6.0f} ms  "
            f"(p95 from the actual send {r['from_send_p95_ms']:.1f} ms)  errors {errors}  "
            f"{'meets' if ok else 'MISSES'} p95 ≤ {TARGET_P95_MS:.0f} ms"
        )
    lag = max(r["send_lag_p95_ms"] for r in result["routes"].values())
    total = sum(r["requests"] for r in result["routes"].values()) / result["seconds"]
    print(
        f"  achieved {total:.1f} requests/s in all (asked {result['rate_per_s']:.0f}, this "
        f"seed's Poisson draw {result['scheduled_per_s']:.1f}); generator send lag "
        f"p95 {lag:.1f} ms; load average {loads[0]:.2f} before, {loads[1]:.2f} after (1 min, "
        f"{os.cpu_count()} cores)"
    )
    return met


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--db", help="a store URL (PostgreSQL); default: the cached SQLite store")
    parser.add_argument("--studies", type=int, default=100_000)
    parser.add_argument("--users", type=int, default=20)
    parser.add_argument("--rate", type=float, default=40.0, help="requests per second in all")
    parser.add_argument("--open-share", type=float, default=0.2, help="share of study opens")
    parser.add_argument("--seconds", type=float, default=60.0, help="measured seconds per run")
    parser.add_argument("--warmup", type=float, default=10.0, help="seconds of load before")
    parser.add_argument("--runs", type=int, default=2)
    parser.add_argument("--seed", type=int, default=15)
    parser.add_argument("--rebuild", action="store_true", help="build the store again")
    parser.add_argument("--profile", type=Path, help="sample the server (py-spy) into this file")
    args = parser.parse_args()
    random.seed(args.seed)

    from reporting.store.engine import resolve_url, shown

    t0 = time.perf_counter()
    built = lab_store.ensure(args.db, args.studies, args.users, rebuild=args.rebuild)
    where = shown(resolve_url(built.url))  # without a password
    if built.build_seconds is None:
        print(f"store: reused {where} ({time.perf_counter() - t0:.1f} s)")
    else:
        print(f"store: built {where} in {built.build_seconds:.0f} s")
    print(f"  {built.studies} studies: {built.how}")
    with tempfile.TemporaryDirectory(prefix="bench-lab-") as folder:
        plan_path = plan(built.url, built, Path(folder))
        port = free_port()
        log = Path(folder) / "server.log"
        server = start_server(built.url, port, log)
        met = []
        try:
            print(
                f"server: python -m reporting serve --db … --port {port} (pid {server.pid}); "
                f"{args.users} readers, Poisson {args.rate:g}/s in all, {args.open_share:.0%} opens, "
                f"{args.warmup:g} s warm-up + {args.seconds:g} s measured per run"
            )
            for run in range(args.runs):
                before = os.getloadavg()[0]
                result, cpu, wall = load(port, plan_path, args, run, server.pid)
                print(f"run {run + 1}:")
                met.append(show(result, (before, os.getloadavg()[0])))
                sent = sum(r["requests"] for r in result["routes"].values())
                total = sent * (args.warmup + args.seconds) / args.seconds
                print(
                    f"  server process after sign-in: {cpu:.1f} s of CPU in {wall:.0f} s "
                    f"({cpu / wall:.0%} of one core), about {cpu / total * 1000:.1f} ms of CPU per "
                    "request (a single process: one core's worth at most, the GIL)"
                )
            if args.profile is not None:
                # an extra run under the sampler, not counted: sampling slows the server down
                spy = profile(server.pid, args.profile)
                if spy is not None:
                    result, _, _ = load(port, plan_path, args, args.runs, server.pid)
                    spy.send_signal(signal.SIGINT)  # py-spy writes its samples and stops
                    spy.wait(timeout=60)
                    print("profiled run (not counted; the sampler slows the server):")
                    show(result, (os.getloadavg()[0], os.getloadavg()[0]))
                    print(f"server profile, share of busy samples per function ({args.profile}):")
                    for share, frame in top_frames(args.profile):
                        print(f"  {share:6.1%}  {frame[:150]}")
        finally:
            server.terminate()
            try:
                server.wait(timeout=10)
            except subprocess.TimeoutExpired:
                server.kill()
            errors = [line for line in log.read_text().splitlines() if "Traceback" in line]
            if errors:
                print(f"server log had {len(errors)} tracebacks:\n{log.read_text()[-3000:]}")
    print(
        f"target p95 ≤ {TARGET_P95_MS:.0f} ms on both routes: met in {sum(met)} of {len(met)} runs"
    )


if __name__ == "__main__":
    main()
