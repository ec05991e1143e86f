"""Timing of the replenishment fits: 34 curves of 60 frames, ours against a scipy curve_fit loop.

A script that prints figures, not a test. The curves are a seeded stand-in for one study (17
segments at rest and at peak, one frame per beat, 5 % noise). Targets (issue 4): all 34 fitted in
≤ 20 ms in-process, at least 5× faster than a loop of scipy.optimize.curve_fit over the same curves
measured in the same run, with residuals no worse. Also printed: the cost of the whole kinetics
step of a study (read the demo curve file, fit, reserve, models) and of importing numpy cold.

Run from the repository root; for a fair numpy timing unset the OpenBLAS overrides for this one
command only::

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_kinetics.py
"""

from __future__ import annotations

import math
import statistics
import subprocess
import sys
import time
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt
from scipy.optimize import OptimizeWarning, curve_fit  # type: ignore[import-untyped]

from reporting.kinetics import analyze_kinetics, fit_curves, load_curves
from reporting.segments import Territory, built_in_map
from reporting.settings import default_settings

ROOT = Path(__file__).resolve().parents[1]
CURVES, FRAMES, SEED = 34, 60, 34
TARGET_MS, TARGET_SPEEDUP = 20.0, 5.0
FloatArray = npt.NDArray[np.float64]


def model(t: FloatArray, a: float, beta: float, c: float) -> FloatArray:
    out: FloatArray = a * (1.0 - np.exp(-beta * t)) + c
    return out


def make_curves() -> list[tuple[FloatArray, FloatArray]]:
    rng = np.random.default_rng(SEED)
    curves = []
    for i in range(CURVES):
        beat = 60.0 / (64 if i < CURVES // 2 else 92)
        t = np.concatenate([[0.0], np.cumsum(beat * (1 + 0.03 * rng.standard_normal(FRAMES - 1)))])
        a = rng.uniform(6, 14)
        beta = rng.uniform(0.7, 1.0) if i < CURVES // 2 else rng.uniform(0.9, 2.6)
        curves.append((t, model(t, a, beta, 1.5) + rng.normal(0, 0.05 * a, FRAMES)))
    return curves


def best_of(run: Callable[[], Any], repeats: int) -> tuple[float, float]:
    """(minimum, median) wall time in ms."""
    run()  # warm-up
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        run()
        times.append((time.perf_counter() - start) * 1e3)
    return min(times), statistics.median(times)


def scipy_loop(curves: list[tuple[FloatArray, FloatArray]]) -> list[float]:
    """curve_fit per curve from a data-driven start (its fastest usual path: unbounded LM)."""
    out = []
    for t, y in curves:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", OptimizeWarning)
                warnings.simplefilter("ignore", RuntimeWarning)
                p, _ = curve_fit(model, t, y, p0=(float(np.ptp(y)), 1.0, float(y.min())))
            out.append(float(((y - model(t, *p)) ** 2).sum()))
        except RuntimeError:
            out.append(math.inf)
    return out


def cold_import_ms(module: str) -> float:
    code = f"import time; s = time.perf_counter(); import {module}; print((time.perf_counter() - s) * 1e3)"
    runs = [
        float(
            subprocess.run(
                [sys.executable, "-c", code], capture_output=True, text=True, check=True
            ).stdout
        )
        for _ in range(5)
    ]
    return statistics.median(runs)


def main() -> None:
    settings = default_settings()
    bounds = {
        "beta_min": settings.kinetics_beta_min_per_s,
        "beta_max": settings.kinetics_beta_max_per_s,
    }
    curves = make_curves()

    ours_min, ours_med = best_of(lambda: fit_curves(curves, **bounds), 200)
    scipy_min, scipy_med = best_of(lambda: scipy_loop(curves), 20)
    ours = fit_curves(curves, **bounds)
    theirs = scipy_loop(curves)
    tss = np.array([((y - y.mean()) ** 2).sum() for _, y in curves])
    excess = (ours.rss - np.array(theirs)) / tss  # > 0: ours worse, relative to the curve's TSS

    demo = ROOT / "reporting" / "data" / "demo" / "DEMO-0006.curves.csv"
    standard = built_in_map("standard")

    def kinetics_step() -> None:
        analyze_kinetics(
            load_curves(demo, segment_model=17, settings=settings),
            segment_model=17,
            territory_of=lambda n: standard.territory_of(17, n) if n <= 17 else Territory.LAD,
            settings=settings,
        )

    step_min, step_med = best_of(kinetics_step, 50)

    print(f"{CURVES} curves × {FRAMES} frames, numpy {np.__version__}")
    print(
        f"  ours (vectorised, fit only)     min {ours_min:7.2f} ms   median {ours_med:7.2f} ms   target ≤ {TARGET_MS:g} ms"
    )
    print(f"  scipy curve_fit loop            min {scipy_min:7.2f} ms   median {scipy_med:7.2f} ms")
    print(
        f"  speed-up (median / median)      {scipy_med / ours_med:7.1f}×   target ≥ {TARGET_SPEEDUP:g}×"
    )
    print(
        f"  residuals vs scipy: ours lower by > 1e-9·TSS on {int((excess < -1e-9).sum())}, "
        f"within ±1e-9·TSS on {int((np.abs(excess) <= 1e-9).sum())}, "
        f"higher by > 1e-9·TSS on {int((excess > 1e-9).sum())} (largest excess {excess.max():.1e}·TSS)"
    )
    print(
        f"  kinetics step of DEMO-0006 (read + fit + reserve + models): median {step_med:.2f} ms (min {step_min:.2f})"
    )
    print(
        f"  cold import: reporting.kinetics.fit {cold_import_ms('reporting.kinetics.fit'):.0f} ms, "
        f"numpy {cold_import_ms('numpy'):.0f} ms (paid only by studies with curves)"
    )
    ok = ours_med <= TARGET_MS and scipy_med / ours_med >= TARGET_SPEEDUP and excess.max() <= 1e-9
    print("  targets met" if ok else "  TARGETS NOT MET")


if __name__ == "__main__":
    main()
