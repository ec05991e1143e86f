"""Batch throughput and memory: prints figures, asserts nothing (not a test).

    python benchmarks/bench_batch.py                 # 1,000 studies, --jobs 2, no PDFs, YAML and JSON
    python benchmarks/bench_batch.py --pdf 200       # also 200 studies with PDFs
    python benchmarks/bench_batch.py --memory        # parent peak RSS for 250 / 1,000 / 4,000 studies

Targets (issue 5): ≥ 500 studies/s without PDFs and ≥ 20 studies/s with PDFs at --jobs 2; peak memory
independent of the number of studies. Each throughput figure is one whole ``segreport batch`` command
in a fresh process, as a user runs it (start-up and imports included, the same for YAML and JSON).
Besides wall-clock studies/s the script prints CPU time per study (the command and its workers),
which does not depend on what else the machine is running: two idle cores give at most
2000 / cpu_ms studies/s. All studies are invented.
"""

from __future__ import annotations

import argparse
import json
import random
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import yaml

from reporting.batch import BatchOptions, run_batch

FIRST = ["Orla", "Tamsin", "Bertil", "Ysolde", "Caius", "Marit"]
LAST = ["Fenwick", "Quillon", "Brackenridge", "Marlowe", "Vantreight"]


def invented_study(i: int, rng: random.Random) -> dict[str, Any]:
    protocol = ["dobutamine", "treadmill", "bicycle", "vasodilator"][i % 4]
    names = ["rest", "low_dose", "peak"] if protocol == "dobutamine" else ["rest", "peak"]
    stages = {
        stage: {
            "heart_rate_bpm": 65 + 35 * n + rng.randint(0, 30),
            "systolic_bp_mmhg": rng.randint(105, 175),
            "wall_motion": "".join(rng.choice("11111112223x") for _ in range(17)),
            **({"lvef_percent": rng.randint(35, 70)} if stage != "low_dose" else {}),
        }
        for n, stage in enumerate(names)
    }
    study: dict[str, Any] = {
        "schema_version": 1,
        "study": {
            "id": f"BENCH-{i:06d}",
            "date": f"2026-{1 + i % 12:02d}-{1 + i % 28:02d}",
            "reader": f"Dr {rng.choice(FIRST)} {rng.choice(LAST)}",
        },
        "patient": {
            "id": f"B{i:07d}",
            "name": f"{rng.choice(FIRST)} {rng.choice(LAST)}",
            "age_years": rng.randint(40, 85),
        },
        "indication": "Exertional chest discomfort.",
        "protocol": protocol,
        "stages": stages,
    }
    if protocol == "treadmill":
        study["exercise"] = {"duration_min": 8.5, "max_st_deviation_mm": 1.0, "angina_index": 1}
    return study


def write_studies(folder: Path, count: int, kind: str) -> Path:
    rng = random.Random(count)
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(count):
        study = invented_study(i, rng)
        as_json = kind == "json" or (kind == "mixed" and i % 2)
        path = folder / f"s{i:06d}.{'json' if as_json else 'yaml'}"
        path.write_text(json.dumps(study) if as_json else yaml.safe_dump(study, sort_keys=False))
    return folder


def children_cpu_seconds() -> float:
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return kids.ru_utime + kids.ru_stime


def timed(indir: Path, outdir: Path, jobs: int, pdf: bool) -> tuple[float, float]:
    """One ``segreport batch`` run as a user starts it: a fresh process, imports included."""
    command = [sys.executable, "-m", "reporting", "batch", str(indir), "-o", str(outdir)]
    command += ["--jobs", str(jobs), "-q", *([] if pdf else ["--no-pdf"])]
    cpu0, t0 = children_cpu_seconds(), time.perf_counter()
    done = subprocess.run(command, capture_output=True, text=True)
    if done.returncode != 0:
        raise SystemExit(f"segreport batch failed:\n{done.stderr}")
    return time.perf_counter() - t0, children_cpu_seconds() - cpu0


def throughput(count: int, jobs: int, kind: str, pdf: bool, root: Path) -> None:
    indir = write_studies(root / f"in-{kind}-{count}", count, kind)
    wall, cpu = timed(indir, root / f"out-{kind}-{count}-{pdf}", jobs, pdf)
    print(
        f"{count:>6} {kind:<5} studies  jobs={jobs}  pdf={'yes' if pdf else 'no ':<3}  "
        f"{count / wall:7.1f} studies/s  ({1000 * cpu / count:5.2f} ms CPU per study)"
    )


def one_run(count: int, jobs: int) -> None:
    """Child mode for --memory: one batch; print the parent's Python heap peak and peak RSS (MiB)."""
    import tracemalloc

    with tempfile.TemporaryDirectory() as tmp:
        indir = write_studies(Path(tmp) / "in", count, "json")
        run_batch(indir, BatchOptions(outdir=Path(tmp) / "warm", pdf=False), jobs=1, studies=[])
        tracemalloc.start()
        run_batch(indir, BatchOptions(outdir=Path(tmp) / "out", pdf=False), jobs=jobs)
        _, heap_peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        workers = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
        print(json.dumps({"heap": heap_peak / 2**20, "rss": rss / 1024, "workers": workers / 1024}))


def memory(jobs: int, counts: list[int]) -> None:
    print("parent memory against number of studies (no PDFs):")
    for count in counts:
        out = subprocess.run(
            [sys.executable, __file__, "--one", str(count), "--jobs", str(jobs)],
            check=True,
            capture_output=True,
            text=True,
        ).stdout
        figures = json.loads(out.strip().splitlines()[-1])
        print(
            f"{count:>7} studies  Python heap peak during the batch {figures['heap']:6.1f} MiB"
            f"  peak RSS {figures['rss']:6.1f} MiB  largest worker RSS {figures['workers']:6.1f} MiB"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--studies", type=int, default=1000)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument(
        "--pdf", type=int, default=0, metavar="N", help="also time N studies with PDFs"
    )
    parser.add_argument("--memory", action="store_true", help="peak memory against study count")
    parser.add_argument("--one", type=int, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one is not None:
        one_run(args.one, args.jobs)
        return
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        for kind in ("yaml", "json"):
            throughput(args.studies, args.jobs, kind, False, root)
        if args.pdf:
            try:
                import reporting.render  # noqa: F401
            except ImportError:
                print("PDF timing skipped: reporting.render is not available yet")
            else:
                throughput(args.pdf, args.jobs, "json", True, root)
    if args.memory:
        memory(args.jobs, [250, 1000, 4000])


if __name__ == "__main__":
    main()
