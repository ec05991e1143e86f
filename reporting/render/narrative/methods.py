"""The Methods line of the referrer's pages: every method and published source in one place.

The referring doctor's text carries no citations or formulas; the sentences that name them inline
for the reader (entry page, text narrative) drop them for the PDF, and this module gathers them into
one line at the end. The record keeps each source beside its criterion, note or threshold.
"""

from __future__ import annotations

from reporting.notes import REFERRER_NOTES
from reporting.render.narrative.words import FORMULA_WORDS
from reporting.results import Analysis

SEGMENT_SOURCE = "Cerqueira MD et al., Circulation 2002"
SCORING_SOURCE = "wall-motion scores: Lang RM et al., JASE 2015"
RESPONSE_SOURCE = "responses to stress: Marwick TH, Heart 2003"
EXTENT_SOURCE = "extent (1–2 segments limited, 3 or more extensive): Kataoka A et al., Cardiovasc Ultrasound 2015"
RISK_SOURCE = "risk bands: Fihn SD et al., Circulation 2012"
DUKE_SOURCE = "Mark DB et al., NEJM 1991"


def sources(analysis: Analysis) -> list[str]:
    """Methods and sources, each once, in reading order."""
    out = [
        f"{int(analysis.segment_model)}-segment model: {SEGMENT_SOURCE}",
        f"territory map: {analysis.territory_map.title}",  # its full source stays in the record
        SCORING_SOURCE,
        RESPONSE_SOURCE,
    ]
    if analysis.conclusion.ischemic_segments:
        out.append(EXTENT_SOURCE)
    out.append(RISK_SOURCE)
    s = analysis.stress
    if s.heart_rate_target_applies and s.age_predicted_max_hr_bpm is not None:
        out.append(f"age-predicted maximum heart rate: {FORMULA_WORDS[s.heart_rate_formula]}")
    if s.duke_treadmill_score is not None:
        out.append(f"Duke treadmill score: {DUKE_SOURCE}")
    if s.hr_recovery_source:
        out.append(f"heart-rate recovery cut-off: {s.hr_recovery_source}")
    c = analysis.conclusion
    out += [r.source for r in c.risk_criteria]
    out += [f.source for f in c.high_risk_findings]
    out += [
        n.source
        for n in analysis.notes
        if n.source and (n.kind in REFERRER_NOTES or n.kind in analysis.study.kept_notes)
    ]
    # the fitted formula and its source stand in the caption of the curve page
    return list(dict.fromkeys(x.strip().rstrip(".") for x in out if x and x.strip()))
