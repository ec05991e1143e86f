"""Analysis speed: in-process studies per second, and `segreport analyze` as a whole process.

Targets (issue 2): in-process analysis >= 2,000 studies/s on one core; one `segreport analyze` run
within 1.5x of `python -c "import pydantic, yaml, click"`. Prints figures; asserts nothing.

    python benchmarks/bench_analysis.py
"""

from __future__ import annotations

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


def in_process(rounds: int = 3, per_round: int = 2000) -> None:
    documents = [yaml.safe_load(demo_study_text(n)) for n in demo_study_names()]
    documents = [d for d in documents if "perfusion_curves" not in d]
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


def whole_process(repeats: int = 7) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        write_demo(Path(tmp))
        study = Path(tmp) / "DEMO-0002.yaml"

        def timed(argv: list[str]) -> float:
            times = []
            for _ in range(repeats):
                start = time.perf_counter()
                subprocess.run(argv, check=True, capture_output=True)
                times.append(time.perf_counter() - start)
            return statistics.median(times)

        baseline = timed([sys.executable, "-c", "import pydantic, yaml, click"])
        # `import pydantic` alone is lazy: its schema machinery loads with the first model. This
        # second baseline shows what any program with one pydantic model pays before its own work.
        one_model = timed(
            [
                sys.executable,
                "-c",
                "import yaml, click\nfrom pydantic import BaseModel\nclass M(BaseModel):\n    x: int",
            ]
        )
        ours = timed([sys.executable, "-m", "reporting", "analyze", str(study)])
        helps = timed([sys.executable, "-m", "reporting", "--help"])
    print(
        f"python -c 'import pydantic, yaml, click': {1000 * baseline:6.0f} ms (median of {repeats})"
    )
    print(
        f"segreport analyze DEMO-0002:              {1000 * ours:6.0f} ms  ratio {ours / baseline:.2f} (target <= 1.5)"
    )
    print(
        f"same imports + one pydantic model:        {1000 * one_model:6.0f} ms  segreport analyze ratio {ours / one_model:.2f}"
    )
    print(f"segreport --help:                         {1000 * helps:6.0f} ms")


if __name__ == "__main__":
    in_process()
    whole_process()
