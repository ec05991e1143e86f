"""Generate the invented demo perfusion study DEMO-0006 and its time-intensity curves.

Everything here is invented: the clinic (Larkspur Valley Heart Clinic), the people and the curves.
The curves follow the replenishment model y(t) = A(1 − e^(−βt)) + C (Wei K et al., Circulation
1998;97:473; offset C: Vogel R et al., JACC 2005;45:754) with Gaussian noise, seeded, so the files are
the same on every run. One frame per beat: rest at 64 bpm, peak vasodilator stress at 92 bpm, with
a 3 % beat-to-beat jitter; three pre-flash frames (negative time) per curve, which are not fitted.

The scenario is a single-vessel pattern: one stenosis in the mid LAD, beyond its first diagonal and
first septal branches, so the distal LAD segments (mid and apical: 7, 8, 13, 14 and the apex 17)
replenish slowly at peak stress, while the proximal LAD segments 1 and 2 (basal anterior and basal
anteroseptal), fed before the stenosis, behave like the RCA and LCx segments.

True parameters (A and C in linear intensity units, β in 1/s, noise σ as a fraction of A):

    segments                                  stage   A        β      C     σ / A
    all 17                                    rest    10 × r   0.85   1.5   0.035
    spared: RCA, LCx and LAD 1, 2 (1–6,       peak    11.5 × r 2.125  1.5   0.035  (β reserve 2.5)
      9–12, 15, 16)
    beyond the LAD stenosis: 7, 8, 13, 14     peak    9 × r    0.9    1.5   0.035  (β reserve 1.06)
    LAD apex: 17 (beyond the stenosis)        peak    9 × r    0.9    1.5   0.45   (a poor fit)

r is the ring factor: basal 0.8, mid 1.0, apical and apex 1.1 (weaker basal signal). So segments
beyond the stenosis have an A·β reserve of 0.9 × 0.9 / 0.85 ≈ 0.95 and the spared ones
1.15 × 2.5 = 2.875; the LAD territory as a whole (segments 1, 2, 7, 8, 13, 14 with good fits) has a
reduced reserve. Time to 90 % of plateau, ln 10 / β: 2.71 s at rest; at peak 1.08 s in spared
segments and 2.56 s beyond the stenosis.

Visual perfusion scores: all normal at rest; at peak the segments beyond the stenosis are scored
reduced (2), except segment 7 (mid anterior), scored normal although its fitted replenishment is
slow (a cross-check note); and the spared segment 2 (basal anteroseptal) is scored reduced although
its replenishment is normal (the converse note, as from a basal attenuation artefact). Every
reduced score lies in the LAD territory, so the conclusion is a single-vessel LAD pattern.

Run from the repository root::

    python examples/perfusion/generate_curves.py [--outdir reporting/data/demo]
"""

from __future__ import annotations

import argparse
import csv
import io
from pathlib import Path

import numpy as np

SEED = 20261104
STUDY_ID = "DEMO-0006"
LAD = (1, 2, 7, 8, 13, 14, 17)  # the LAD territory under the standard map
# Segments beyond the mid-LAD stenosis; LAD segments 1 and 2 are fed before it.
STENOSED = (7, 8, 13, 14, 17)
RING_FACTOR = {**dict.fromkeys(range(1, 7), 0.8), **dict.fromkeys(range(7, 13), 1.0)}
RING_FACTOR |= dict.fromkeys(range(13, 18), 1.1)
HEART_RATE_BPM = {"rest": 64, "peak": 92}
FRAMES = {"rest": 16, "peak": 18}
PRE_FLASH_FRAMES = 3
JITTER = 0.03
OFFSET_C = 1.5
NOISE_FRACTION = 0.035
POOR_CURVE = ("peak", 17)
POOR_NOISE_FRACTION = 0.45
# Visual scores at peak: reduced beyond the stenosis, except segment 7 (scored normal though slow);
# segment 2 is spared but scored reduced (normal replenishment).
PERFUSION_PEAK = {n: (2 if n in STENOSED else 1) for n in range(1, 18)} | {7: 1, 2: 2}


def true_parameters(stage: str, segment: int) -> tuple[float, float, float]:
    """(A, β, C) of one curve."""
    r = RING_FACTOR[segment]
    if stage == "rest":
        return 10.0 * r, 0.85, OFFSET_C
    if segment in STENOSED:
        return 9.0 * r, 0.9, OFFSET_C
    return 11.5 * r, 2.125, OFFSET_C


def curves_csv(seed: int = SEED) -> str:
    """The curve file text."""
    rng = np.random.default_rng(seed)
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(["stage", "segment", "time_s", "intensity"])
    for stage in ("rest", "peak"):
        beat = 60.0 / HEART_RATE_BPM[stage]
        intervals = beat * (1 + JITTER * rng.standard_normal(FRAMES[stage] - 1))
        times = np.concatenate([[0.0], np.cumsum(intervals)])
        before = -beat * np.arange(PRE_FLASH_FRAMES, 0, -1)
        for segment in range(1, 18):
            a, beta, c = true_parameters(stage, segment)
            noise = POOR_NOISE_FRACTION if (stage, segment) == POOR_CURVE else NOISE_FRACTION
            # Before the flash the myocardium holds its steady-state contrast: the plateau.
            pre = a + c + noise * a * rng.standard_normal(PRE_FLASH_FRAMES)
            post = a * (1 - np.exp(-beta * times)) + c
            post = post + noise * a * rng.standard_normal(times.size)
            for t, y in zip(
                np.concatenate([before, times]), np.concatenate([pre, post]), strict=True
            ):
                writer.writerow([stage, segment, f"{t:.3f}", f"{max(y, 0.0):.4f}"])
    return out.getvalue()


def study_yaml() -> str:
    """The study file text."""
    peak = "".join(str(PERFUSION_PEAK[n]) for n in range(1, 18))
    peak_scores = f"{peak[:6]} {peak[6:12]} {peak[12:16]} {peak[16]}"
    return f"""\
# Invented scenario (Larkspur Valley Heart Clinic is fictitious): vasodilator contrast perfusion
# study with quantitative replenishment curves; a single-vessel pattern: reduced flow reserve beyond
# a mid-LAD stenosis.
# Made by examples/perfusion/generate_curves.py (seed {SEED}); see its docstring for the true
# curve parameters.
schema_version: 1
study:
  id: {STUDY_ID}
  date: 2026-11-04
  lab: Larkspur Valley Heart Clinic, Echo Laboratory
  reader: Dr Ines Halvorsen
  sonographer: R. Castellanos-Whitby
  referring_physician: Dr Emeric Stavanger-Obi
  report_status: preliminary
patient: {{id: LV-102391, name: Thaddeus Marchbank-Oyelaran, age_years: 67, sex: male}}
indication: Exertional breathlessness; diabetes and hypertension; unable to exercise.
protocol: vasodilator
contrast:
  agent: lipid-shelled perfluorocarbon microspheres
  administration: infusion
  imaging_mi: 0.12
  flash_mi: 1.0
vasodilator: {{agent: adenosine, dose_ug_kg_min: 140}}
procedure: {{baseline_rhythm: sinus, stop_reasons: [protocol_complete], complications: [none], arrhythmias: [none]}}
stages:
  rest:
    heart_rate_bpm: {HEART_RATE_BPM["rest"]}
    systolic_bp_mmhg: 138
    diastolic_bp_mmhg: 82
    lvef_percent: 60
    wall_motion: "111111 111111 1111 1"
    perfusion: "111111 111111 1111 1"
  peak:
    heart_rate_bpm: {HEART_RATE_BPM["peak"]}
    systolic_bp_mmhg: 126
    diastolic_bp_mmhg: 74
    lvef_percent: 62
    wall_motion: "111111 111111 1111 1"
    perfusion: "{peak_scores}"
    symptoms: Mild chest tightness and flushing during the vasodilator infusion, settled after it.
perfusion_curves: {STUDY_ID}.curves.csv
"""


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    default = Path(__file__).resolve().parents[2] / "reporting" / "data" / "demo"
    parser.add_argument("--outdir", type=Path, default=default, help="folder to write into")
    args = parser.parse_args()
    args.outdir.mkdir(parents=True, exist_ok=True)
    (args.outdir / f"{STUDY_ID}.yaml").write_text(study_yaml(), encoding="utf-8")
    (args.outdir / f"{STUDY_ID}.curves.csv").write_text(curves_csv(), encoding="utf-8")
    print(f"Wrote {STUDY_ID}.yaml and {STUDY_ID}.curves.csv into {args.outdir}")


if __name__ == "__main__":
    main()
