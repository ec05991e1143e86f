"""The top of the referring-doctor PDF: the lab and title, the patient and study grid, indication
and protocol, and the answer box (the one-sentence summary and the key figures, edged in the colour
of the conclusion).

The heart-rate percentage is printed rounded down, as in the narrative, so the box never shows 85 %
beside "stress not adequate".
"""

from __future__ import annotations

from reportlab.lib.styles import ParagraphStyle
from reportlab.platypus import Flowable, Spacer, Table, TableStyle

from reporting.model import Stage
from reporting.render import narrative, palette
from reporting.render.letterhead import logo_flowable
from reporting.render.pdf.styles import Styles, dash, labelled, paragraph, sentence
from reporting.results import Analysis, DiagnosticStatus, NonDiagnosticReason

LOGO_MAX_WIDTH = 110.0
LOGO_MAX_HEIGHT = 40.0
"""Box (pt) the lab's logo is scaled into, keeping its proportions."""

STATUS_COLOURS = {
    DiagnosticStatus.ISCHEMIA: palette.OKABE_ITO["vermillion"],
    DiagnosticStatus.NO_ISCHEMIA: palette.OKABE_ITO["bluish_green"],
    DiagnosticStatus.NON_DIAGNOSTIC: palette.OKABE_ITO["orange"],
}


def report_title(analysis: Analysis) -> str:
    return f"Stress echocardiography report {analysis.study.id}"


def header(
    analysis: Analysis, width: float, st: Styles, status: str | None = None
) -> list[Flowable]:
    study, patient = analysis.study, analysis.patient
    lab_cell: list[Flowable] = [paragraph(study.lab or "Echocardiography laboratory", st["lab"])]
    if study.lab_address:
        lab_cell.append(paragraph(study.lab_address, st["small"]))
    if study.lab_logo:
        logo = logo_flowable(study.lab_logo, LOGO_MAX_WIDTH, LOGO_MAX_HEIGHT)
        beside = Table([[logo, lab_cell]], colWidths=[logo.wrap(width, width)[0] + 8, None])
        beside.setStyle(
            TableStyle(
                [
                    ("VALIGN", (0, 0), (-1, -1), "MIDDLE"),
                    ("LEFTPADDING", (0, 0), (-1, -1), 0),
                    ("RIGHTPADDING", (0, 0), (-1, -1), 0),
                    ("TOPPADDING", (0, 0), (-1, -1), 0),
                    ("BOTTOMPADDING", (0, 0), (-1, -1), 0),
                ]
            )
        )
        lab_cell = [beside]
    shown = status or study.report_status.value
    status_style = ParagraphStyle(
        "status", parent=st["doc_title"], fontSize=8, leading=10, textColor=palette.MUTED
    )
    title_cell = [
        paragraph("Stress echocardiography report", st["doc_title"]),
        paragraph(f"Report status: {shown.upper()}", status_style),
    ]
    top = Table([[lab_cell, title_cell]], colWidths=[width * 0.6, width * 0.4])
    top.setStyle(
        TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
                ("RIGHTPADDING", (0, 0), (-1, -1), 0),
                ("LINEBELOW", (0, 0), (-1, 0), 1.2, palette.INK),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 5),
            ]
        )
    )
    age = f"{patient.age_years} y" if patient.age_years is not None else patient.age_group
    age_sex = " ".join(x for x in (age, patient.sex.value if patient.sex else None) if x)
    pairs = [
        ("Patient", patient.name),
        ("Patient ID", patient.id),
        ("Study ID", study.id),
        ("Age, sex", age_sex or None),
        ("Date of birth", patient.birth_date.isoformat() if patient.birth_date else None),
        ("Study date", study.date.isoformat() if study.date else str(study.year)),
        ("Referring", study.referring_physician),
        ("Reader", study.reader),
        ("Sonographer", study.sonographer),
    ]
    rows = []
    for i in range(0, len(pairs), 3):
        row: list[Flowable] = []
        for label, value in pairs[i : i + 3]:
            row += [paragraph(label, st["label"]), paragraph(dash(value), st["cell"])]
        rows.append(row)
    label_w, value_w = width * 0.105, width * (1 / 3 - 0.105)
    grid = Table(rows, colWidths=[label_w, value_w] * 3)
    grid.setStyle(
        TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
                ("RIGHTPADDING", (0, 0), (-1, -1), 4),
                ("TOPPADDING", (0, 0), (-1, -1), 1.5),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 1.5),
            ]
        )
    )
    protocol = narrative.stress_paragraphs(analysis)[0]
    lines = [
        top,
        Spacer(1, 4),
        grid,
        Spacer(1, 3),
        labelled("Indication", analysis.study.indication or "not given", st),
        *referral_line(analysis, st),
        labelled("Protocol", protocol, st),
    ]
    if study.deidentified:
        lines.append(
            labelled("Record", "de-identified (names, record numbers and exact dates removed)", st)
        )
    if analysis.contrast_used:
        lines.append(
            labelled("Enhancing agent", analysis.contrast_agent or "used (agent not named)", st)
        )
    return lines


def referral_line(analysis: Analysis, st: Styles) -> list[Flowable]:
    """The referring doctor's question, when the study records one (escaped by ``labelled``)."""
    question = analysis.study.referral_question
    return [labelled("Referral question", question, st)] if question else []


def headline(analysis: Analysis, st: Styles) -> list[Flowable]:
    """The answer: the reader's impression when short enough for the box, else the computed
    headline; then the computed findings when the reader's words differ, and the mark of an
    impression written against earlier findings."""
    state = narrative.impression_state_line(analysis)
    out: list[Flowable] = []
    if state:
        out.append(paragraph(state, st["summary"]))
    if narrative.reader_impression_in_headline(analysis):
        words = narrative.reader_paragraphs(analysis.study.impression)
        out += [paragraph(w, st["summary"]) for w in words]
        if narrative.impression_differs(analysis):
            out.append(paragraph(f"Computed findings: {narrative.summary(analysis)}", st["small"]))
        return out
    out.append(paragraph(narrative.summary(analysis), st["summary"]))
    if analysis.study.impression:
        out.append(paragraph("The reader's impression follows under Impression.", st["small"]))
    return out


def answer_box(analysis: Analysis, width: float, st: Styles) -> Table:
    c = analysis.conclusion
    facts = []
    if Stage.PEAK in analysis.wmsi:
        facts.append(f"peak WMSI {analysis.wmsi[Stage.PEAK]:.2f}")
    s = analysis.stress
    if s.peak_hr_bpm is not None:
        pct = (
            f", {narrative.shown_percent(s.peak_hr_percent_of_predicted)} % of predicted"
            if s.peak_hr_percent_of_predicted is not None and s.heart_rate_target_applies
            else ""
        )
        facts.append(f"peak heart rate {s.peak_hr_bpm} bpm{pct}")
    if c.non_diagnostic_reason is NonDiagnosticReason.NO_STRESS_IMAGES:
        facts.append("no stress images")
    else:
        facts.append("adequate stress" if s.adequate else "stress not adequate")
    facts.append(narrative.risk_fact(analysis))
    count = len(c.high_risk_findings)
    facts.append(
        f"{count} high-risk finding{'s' if count != 1 else ''}" if count else "no high-risk finding"
    )
    box = Table(
        [[[*headline(analysis, st), paragraph(sentence("; ".join(facts)), st["body"])]]],
        colWidths=[width],
    )
    box.setStyle(
        TableStyle(
            [
                ("BACKGROUND", (0, 0), (-1, -1), palette.PANEL),
                ("LINEBEFORE", (0, 0), (0, -1), 4, palette.hex_color(STATUS_COLOURS[c.status])),
                ("LEFTPADDING", (0, 0), (-1, -1), 9),
                ("TOPPADDING", (0, 0), (-1, -1), 5),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 6),
            ]
        )
    )
    return box
