"""Analysis speed: in-process studies per second, and `segreport analyze` as a whole process.

Targets: in-process analysis >= 2,000 studies/s on one core (issue 2). One `segreport analyze` run,
as a whole process, within 1.6x of a process that imports pydantic, yaml and click and defines one
pydantic model (issue 11: `import pydantic` alone is lazy, its schema machinery loads with the first
model, so that is what any program with a model pays before its own work). The ratio is of the
medians of 30 interleaved runs, so a burst of load on a shared machine hits both sides alike.
Prints figures; asserts nothing.

    python benchmarks/bench_analysis.py                 # both parts
    python benchmarks/bench_analysis.py --whole-process # start-up only
    python benchmarks/bench_analysis.py --instructions  # per-study instruction count (valgrind)

Wall-clock figures on a shared machine swing by 10 % or more between runs, even for one code in
two folders; ``--instructions`` counts the CPU instructions of validate + analyse per study with
valgrind's callgrind, which gives the same figure on every run, for comparing two versions.
"""

from __future__ import annotations

import argparse
import os
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import yaml

from reporting.analysis import analyze
from reporting.demo import demo_study_names, demo_study_text, write_demo
from reporting.export.record import record_json
from reporting.load import study_from_data


def _demo_documents() -> list[dict[str, object]]:
    """The demo studies without perfusion curves, as parsed documents."""
    documents = [yaml.safe_load(demo_study_text(n)) for n in demo_study_names()]
    return [d for d in documents if "perfusion_curves" not in d]


def in_process(rounds: int = 3, per_round: int = 2000) -> None:
    documents = _demo_documents()
    best_validate = best_full = float("inf")
    for _ in range(rounds):
        start = time.perf_counter()
        for i in range(per_round):
            analyze(study_from_data(documents[i % len(documents)]))
        best_validate = min(best_validate, time.perf_counter() - start)
        start = time.perf_counter()
        for i in range(per_round):
            record_json(analyze(study_from_data(documents[i % len(documents)])))
        best_full = min(best_full, time.perf_counter() - start)
    print(
        f"in-process validate + analyse:          {per_round / best_validate:8.0f} studies/s (target >= 2000)"
    )
    print(f"in-process validate + analyse + record: {per_round / best_full:8.0f} studies/s")


def _analyse_many(count: int) -> None:
    """Child of --instructions: load everything, warm up, then validate + analyse ``count`` studies."""
    documents = _demo_documents()
    for i in range(50 + count):
        analyze(study_from_data(documents[i % len(documents)]))


def _instructions(count: int) -> int:
    # One hash seed for both runs: string hashes decide set and dict layouts and the interpreter's
    # attribute-cache collisions, which move start-up by millions of instructions between seeds.
    done = subprocess.run(
        [
            *("valgrind", "--tool=callgrind", "--callgrind-out-file=/dev/null"),
            *(sys.executable, __file__, "--analyse-many", str(count)),
        ],
        capture_output=True,
        text=True,
        check=True,
        env={**os.environ, "PYTHONHASHSEED": "0"},
    )
    found = re.search(r"Collected : (\d+)", done.stderr)
    if found is None:
        raise SystemExit(f"valgrind printed no instruction count:\n{done.stderr[-2000:]}")
    return int(found.group(1))


def instructions_per_study(count: int = 300) -> None:
    """CPU instructions of one validate + analyse, from two runs that differ only in ``count``."""
    if shutil.which("valgrind") is None:
        raise SystemExit("--instructions needs valgrind (Debian package valgrind)")
    # A run outside valgrind first writes any stale bytecode, which would otherwise be compiled
    # (and counted) in the first measured run only.
    subprocess.run([sys.executable, __file__, "--analyse-many", "0"], check=True)
    per_study = (_instructions(count) - _instructions(0)) / count
    print(f"validate + analyse: {per_study / 1e6:.3f} million instructions per study (callgrind)")


BASELINE = "import yaml, click\nfrom pydantic import BaseModel\nclass M(BaseModel):\n    x: int"
TARGET = 1.6


def _run(argv: list[str], env: dict[str, str]) -> float:
    start = time.perf_counter()
    subprocess.run(argv, check=True, capture_output=True, env=env)
    return time.perf_counter() - start


def _bytecode_env(folder: Path) -> dict[str, str]:
    """The environment with bytecode caching on, cached under ``folder`` for both sides alike.

    An installed package runs from cached bytecode. A checkout run with PYTHONDONTWRITEBYTECODE
    (common in containers) would compile our modules from source on every run while the baseline's
    installed libraries load theirs from cache; a shared cache prefix, filled by the warm-up runs,
    treats both the same and writes nothing into the source tree.
    """
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    env["PYTHONPYCACHEPREFIX"] = str(folder)
    return env


def whole_process(runs: int = 30, *, bytecode_cache: bool = True) -> None:
    """Median wall time of `segreport analyze` and of the baseline, run alternately."""
    with tempfile.TemporaryDirectory() as tmp:
        write_demo(Path(tmp))
        study = Path(tmp) / "DEMO-0002.yaml"
        commands = {
            "baseline": [sys.executable, "-c", BASELINE],
            "analyze": [sys.executable, "-m", "reporting", "analyze", str(study)],
            "imports only": [sys.executable, "-c", "import pydantic, yaml, click"],
            "help": [sys.executable, "-m", "reporting", "--help"],
        }
        env = _bytecode_env(Path(tmp) / "pycache") if bytecode_cache else dict(os.environ)
        for argv in commands.values():  # warm the file cache and the bytecode cache
            _run(argv, env)
        times: dict[str, list[float]] = {name: [] for name in commands}
        for _ in range(runs):
            for name, argv in commands.items():
                times[name].append(_run(argv, env))
    median = {name: statistics.median(t) for name, t in times.items()}
    ratio = median["analyze"] / median["baseline"]
    cache = "bytecode cached" if bytecode_cache else "environment as given"
    print(f"{runs} interleaved runs each ({cache}), medians:")
    print(f"  baseline: imports + one pydantic model   {1000 * median['baseline']:6.0f} ms")
    print(
        f"  segreport analyze DEMO-0002              {1000 * median['analyze']:6.0f} ms"
        f"  ratio {ratio:.2f} (target <= {TARGET})"
    )
    print(
        f"  python -c 'import pydantic, yaml, click' {1000 * median['imports only']:6.0f} ms"
        f"  ratio {median['analyze'] / median['imports only']:.2f} (for reference)"
    )
    print(f"  segreport --help                         {1000 * median['help']:6.0f} ms")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--whole-process", action="store_true", help="start-up figures only")
    parser.add_argument(
        "--instructions", action="store_true", help="instructions per study (needs valgrind)"
    )
    parser.add_argument("--analyse-many", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--runs", type=int, default=30, help="interleaved runs (default 30)")
    parser.add_argument(
        "--as-given",
        action="store_true",
        help="keep the environment's bytecode setting (PYTHONDONTWRITEBYTECODE compiles our "
        "modules from source on every run)",
    )
    args = parser.parse_args()
    if args.analyse_many is not None:
        _analyse_many(args.analyse_many)
        raise SystemExit(0)
    if args.instructions:
        instructions_per_study()
        raise SystemExit(0)
    if not args.whole_process:
        in_process()
    whole_process(args.runs, bytecode_cache=not args.as_given)
