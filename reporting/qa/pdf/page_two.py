"""Page two of the quality PDF: the discordant studies for case review, the studies left out of the
tables, the non-diagnostic rate by reader, the reader-agreement figures when given, the cautions and the sources. Long lists are cut
to the current :class:`~reporting.qa.pdf.page.Limits` with a pointer to the review JSON.
"""

from __future__ import annotations

from typing import Any
from xml.sax.saxutils import escape

from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.platypus import CondPageBreak, Flowable, Paragraph, Spacer, Table

from reporting.qa.agreement import Agreement, BinaryAgreement
from reporting.qa.layout import interval, kappa_text, number, plain_percent, short, table_style
from reporting.qa.pdf.page import (
    FRAME_WIDTH,
    READER_CHARS,
    Limits,
    clip,
    excluded_ids,
    id_list,
    name_list,
)
from reporting.qa.review import Outcome, QualityReview
from reporting.qa.status import NonDiagnosticRate
from reporting.render import safe_text
from reporting.segments import Territory
from reporting.wording import stage_words

OUTCOME_TEXT = {
    Outcome.TRUE_POSITIVE: "true positive",
    Outcome.FALSE_POSITIVE: "false positive",
    Outcome.FALSE_NEGATIVE: "false negative",
    Outcome.TRUE_NEGATIVE: "true negative",
}


def page_two(
    review: QualityReview,
    agreement: Agreement | None,
    s: dict[str, ParagraphStyle],
    limits: Limits,
) -> list[Flowable]:
    story: list[Flowable] = [Paragraph("Discordant studies for case review", s["h2"])]
    if review.discordant:
        rows: list[list[Any]] = [
            [
                "Study",
                "Date",
                "Reader",
                "Echo",
                "Stenosis %",
                "Per patient",
                "Territories",
            ]
        ]
        for d in review.discordant[: limits.discordant_rows]:
            echo = (
                ", ".join(t.value for t in d.echo_territories)
                if d.echo_ischemia
                else "no ischaemia"
            )
            angio = (
                ", ".join(f"{v.value} {number(p)}" for v, p in d.stenosis_percent.items())
                or "no stenosis"
            )
            territories = ", ".join(
                f"{c.territory.value} {'FP' if c.outcome is Outcome.FALSE_POSITIVE else 'FN'}"
                for c in d.discordant_territories
            )
            rows.append(
                [
                    d.study_id,
                    d.date.isoformat() if d.date else str(d.year),
                    safe_text.printable(clip(d.reader or "—", READER_CHARS), s["cell"].fontName),
                    Paragraph(echo, s["cell"]),
                    Paragraph(angio, s["cell"]),
                    OUTCOME_TEXT[d.patient_outcome],
                    Paragraph(territories or "—", s["cell"]),
                ]
            )
        table = Table(
            rows,
            colWidths=[
                24 * mm,
                19 * mm,
                38 * mm,
                22 * mm,
                28 * mm,
                22 * mm,
                FRAME_WIDTH - 153 * mm,
            ],
            hAlign="LEFT",
            repeatRows=1,
        )
        table.setStyle(table_style(s, header_rows=1))
        story.append(table)
        hidden = len(review.discordant) - limits.discordant_rows
        if hidden > 0:
            story.append(Paragraph(f"… and {hidden} more in the review JSON.", s["small"]))
        story.append(
            Paragraph(
                "FP false positive, FN false negative (echo against angiography).", s["small"]
            )
        )
    else:
        story.append(Paragraph("None: every analysed study agrees with angiography.", s["body"]))

    story += [
        Spacer(1, 3 * mm),
        Paragraph("Studies not in the tables", s["h2"]),
        Paragraph(
            f"<b>Without angiography ({len(review.without_angiography)}):</b> {excluded_ids(review.without_angiography, limits)}",
            s["body"],
        ),
        Paragraph(
            f"<b>Viability-only ({len(review.viability_only)}):</b> {excluded_ids(review.viability_only, limits)}",
            s["body"],
        ),
        Paragraph(
            f"<b>Non-diagnostic ({len(review.non_diagnostic)}):</b> {excluded_ids(review.non_diagnostic, limits)}",
            s["body"],
        ),
        Paragraph(
            f"<b>Angiography rows without a record ({len(review.angiography_without_record)}):</b> "
            f"{id_list(review.angiography_without_record, limits)}",
            s["body"],
        ),
    ]
    story += [Spacer(1, 3 * mm), *non_diagnostic_section(review, s, limits)]
    if agreement is not None:
        story += [Spacer(1, 3 * mm), *agreement_section(agreement, s, limits)]
    story += [
        CondPageBreak(30 * mm),
        Spacer(1, 3 * mm),
        Paragraph("Cautions", s["h2"]),
        *[Paragraph(f"• {c}", s["small"]) for c in review.cautions],
        Spacer(1, 2 * mm),
        Paragraph("Sources: " + " ".join(review.sources), s["small"]),
    ]
    return story


def non_diagnostic_section(
    review: QualityReview, s: dict[str, ParagraphStyle], limits: Limits
) -> list[Flowable]:
    """The non-diagnostic rate over the whole period, overall and for the busiest readers."""
    rows: list[list[Any]] = [
        ["Reader", "Studies", "Viability-only", "Non-diagnostic", "95 % interval"]
    ]
    readers = review.non_diagnostic_by_reader
    largest = sorted(readers, key=lambda r: -r.studies)[: limits.groups_per_kind]
    shown = [r for r in readers if r in largest]
    named: list[tuple[str, NonDiagnosticRate]] = [
        (clip(r.reader, READER_CHARS) if r.reader is not None else "(not recorded)", r)
        for r in shown
    ]
    named.append(("All readers", review.non_diagnostic_rate))
    for name, rate in named:
        rows.append(
            [
                Paragraph(safe_text.markup_text(name, s["cell"].fontName), s["cell"]),
                str(rate.studies),
                str(rate.viability_only),
                short(rate.non_diagnostic),
                interval(rate.non_diagnostic),
            ]
        )
    table = Table(
        rows,
        colWidths=[52 * mm, 18 * mm, 26 * mm, 32 * mm, FRAME_WIDTH - 128 * mm],
        hAlign="LEFT",
    )
    table.setStyle(table_style(s, header_rows=1, first_col=True))
    story: list[Flowable] = [
        Paragraph("Non-diagnostic rate by reader", s["h2"]),
        Paragraph(
            "Every study in the period, with or without angiography. Viability-only studies "
            "(rest and low dose only) are not tests for ischaemia and are left out of the rate.",
            s["small"],
        ),
        Spacer(1, 1 * mm),
        table,
    ]
    if len(readers) > len(shown):
        story.append(
            Paragraph(f"… {len(readers) - len(shown)} more readers in the review JSON.", s["small"])
        )
    return story


def agreement_section(
    agreement: Agreement, s: dict[str, ParagraphStyle], limits: Limits
) -> list[Flowable]:
    readers_a = name_list(agreement.readers_a)
    readers_b = name_list(agreement.readers_b)
    font = s["body"].fontName
    rows: list[list[Any]] = [
        ["Comparison", "Pairs", "Agreement", "Kappa", "Linear kappa", "Quadratic kappa"]
    ]
    for stage, o in agreement.wall_motion.items():
        rows.append(
            [
                f"Wall motion, {stage_words(stage)}",
                str(o.pairs),
                plain_percent(o.percent_agreement),
                kappa_text(o.unweighted),
                kappa_text(o.linear),
                kappa_text(o.quadratic),
            ]
        )
    binaries: list[tuple[str, BinaryAgreement]] = [
        ("Ischaemia, per patient", agreement.ischemia_per_patient)
    ]
    binaries += [(f"Ischaemia, {t.value}", agreement.ischemia_per_territory[t]) for t in Territory]
    binaries.append(("Ischaemia, territories pooled", agreement.ischemia_all_territories))
    for label, b in binaries:
        rows.append(
            [
                label,
                str(b.pairs),
                plain_percent(b.percent_agreement),
                kappa_text(b.kappa),
                "",
                "",
            ]
        )
    table = Table(
        rows,
        colWidths=[50 * mm, 12 * mm, 20 * mm, *[(FRAME_WIDTH - 82 * mm) / 3] * 3],
        hAlign="LEFT",
    )
    table.setStyle(table_style(s, header_rows=1, first_col=True))
    unmatched = len(agreement.only_in_a) + len(agreement.only_in_b)
    disagreements = escape(
        ", ".join(d.study_id for d in agreement.conclusion_disagreements[: limits.listed_ids])
    )
    more = len(agreement.conclusion_disagreements) - limits.listed_ids
    if more > 0:
        disagreements += f" … and {more} more"
    return [
        Paragraph("Reader agreement", s["h2"]),
        Paragraph(
            f"Reader set A: {safe_text.markup_text(readers_a, font)}. Reader set B: "
            f"{safe_text.markup_text(readers_b, font)}. {agreement.matched_studies} studies read by both; "
            f"{unmatched} read by one side only (not compared). Wall-motion rows compare segment "
            "scores pooled over the studies; ischaemia rows compare yes/no per study, or per study "
            "and territory. Bands of Landis &amp; Koch 1977.",
            s["body"],
        ),
        Spacer(1, 1.5 * mm),
        table,
        Spacer(1, 1.5 * mm),
        Paragraph(
            f"<b>Different conclusions ({len(agreement.conclusion_disagreements)}):</b> "
            f"{disagreements or 'none'}",
            s["body"],
        ),
    ]
