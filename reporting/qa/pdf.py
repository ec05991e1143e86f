"""The lab quality review as a one-to-two page PDF (reportlab).

Page one holds the period and the accounting of every record, the per-patient and per-territory 2×2
tables, the five measures with their Wilson intervals, a chart of sensitivity and specificity by
territory with interval whiskers, and the breakdown by reader and protocol. Page two lists the
discordant studies for case review, the studies left out of the tables, the reader-agreement figures
when given, and the cautions. Long lists are cut with a pointer to the JSON, so the document stays
within two pages. The chart is drawn in :mod:`reporting.qa.chart`, the table styles and number
formats live in :mod:`reporting.qa.layout`. Output is byte-stable: reportlab's invariant mode fixes dates and ids. Free text
(reader and lab names) is escaped before it reaches paragraph markup.
"""

from __future__ import annotations

import io
import logging
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape

from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.platypus import (
    CondPageBreak,
    Flowable,
    KeepTogether,
    PageBreak,
    Paragraph,
    SimpleDocTemplate,
    Spacer,
    Table,
)

from reporting.files import write_atomic
from reporting.qa.agreement import Agreement, BinaryAgreement
from reporting.qa.chart import accuracy_chart
from reporting.qa.layout import (
    interval,
    kappa_text,
    number,
    paragraph_styles,
    percent,
    plain_percent,
    short,
    side_by_side,
    table_style,
)
from reporting.qa.metrics import DiagnosticAccuracy, Proportion
from reporting.qa.review import ExcludedStudy, Outcome, QualityReview
from reporting.render import style
from reporting.segments import Territory

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class _Limits:
    """How much of each long list the PDF shows; the rest is in the review JSON."""

    discordant_rows: int
    listed_ids: int
    groups_per_kind: int


# Tried in turn until the document fits on two pages.
LIMITS = (_Limits(18, 30, 8), _Limits(12, 16, 6), _Limits(6, 8, 4), _Limits(3, 4, 3))
MAX_PAGES = 2
READER_CHARS = 26
MARGIN = 16 * mm
PAGE_WIDTH, PAGE_HEIGHT = A4
FRAME_WIDTH = PAGE_WIDTH - 2 * MARGIN

_OUTCOME_TEXT = {
    Outcome.TRUE_POSITIVE: "true positive",
    Outcome.FALSE_POSITIVE: "false positive",
    Outcome.FALSE_NEGATIVE: "false negative",
    Outcome.TRUE_NEGATIVE: "true negative",
}


def review_pdf_bytes(review: QualityReview, agreement: Agreement | None = None) -> bytes:
    """The quality PDF as bytes (the same input gives the same bytes)."""
    data = b""
    for limits in LIMITS:
        data, pages = _build(review, agreement, limits)
        if pages <= MAX_PAGES:
            break
        log.debug("quality PDF took %d pages; showing less of the long lists", pages)
    return data


def _build(
    review: QualityReview, agreement: Agreement | None, limits: _Limits
) -> tuple[bytes, int]:
    fonts = style.body_fonts()
    styles = paragraph_styles(fonts)
    buffer = io.BytesIO()
    doc = SimpleDocTemplate(
        buffer,
        pagesize=A4,
        leftMargin=MARGIN,
        rightMargin=MARGIN,
        topMargin=MARGIN,
        bottomMargin=MARGIN + 4 * mm,
        title="Stress echo quality review",
        author="segreport",
        subject="Stress echocardiography against angiography; reader agreement",
        creator=review.generator,
        invariant=1,
    )

    def footer(canvas: Any, document: Any) -> None:
        canvas.saveState()
        canvas.setFont(fonts.regular, 7.5)
        canvas.setFillColor(style.MUTED)
        canvas.drawString(
            MARGIN, MARGIN - 2 * mm, f"Stress echo quality review · {_period(review)}"
        )
        canvas.drawRightString(PAGE_WIDTH - MARGIN, MARGIN - 2 * mm, f"page {document.page}")
        canvas.restoreState()

    story = [
        *_page_one(review, styles, fonts, limits),
        PageBreak(),
        *_page_two(review, agreement, styles, limits),
    ]
    doc.build(story, onFirstPage=footer, onLaterPages=footer)
    return buffer.getvalue(), doc.page


def write_review_pdf(
    review: QualityReview, path: Path | str, agreement: Agreement | None = None
) -> None:
    """Write the quality PDF to ``path`` atomically."""
    write_atomic(Path(path), review_pdf_bytes(review, agreement))
    log.info("wrote quality review PDF %s", path)


# --- page one -----------------------------------------------------------------------------------


def _page_one(
    review: QualityReview, s: dict[str, ParagraphStyle], fonts: style.Fonts, limits: _Limits
) -> list[Flowable]:
    c = review.counts
    labs = "; ".join(review.labs) if review.labs else "lab not recorded"
    story: list[Flowable] = [
        Paragraph("Stress echo quality review", s["title"]),
        Paragraph(_text(labs, fonts), s["muted"]),
        Spacer(1, 3 * mm),
        Paragraph(f"<b>Period covered:</b> {_period(review)}.", s["body"]),
        Paragraph(
            f"<b>Reference:</b> invasive angiography; a vessel is significant at a diameter stenosis "
            f"of {number(review.stenosis_percent)} % or more (left main "
            f"{number(review.left_main_stenosis_percent)} % or more, counted for both LAD and LCx). "
            "A study is positive when its record concludes inducible ischaemia; a territory when it is "
            "among the ischaemic territories.",
            s["body"],
        ),
        Paragraph(
            f"<b>Records:</b> {c.records} — analysed {c.analysed}, without angiography "
            f"{c.without_angiography}, non-diagnostic {c.non_diagnostic}, outside the period "
            f"{c.outside_period}. Intervals are Wilson 95 % intervals.",
            s["body"],
        ),
        Spacer(1, 3 * mm),
        Paragraph("Per patient", s["h2"]),
        side_by_side(
            _two_by_two(review.per_patient, "Patients", s),
            _measures([("", review.per_patient)], s),
        ),
        Spacer(1, 3 * mm),
        Paragraph("Per territory", s["h2"]),
        side_by_side(
            *[_two_by_two(review.per_territory[t], t.value, s, 14 * mm) for t in Territory],
            gap=5 * mm,
        ),
        Spacer(1, 2 * mm),
        _measures([(t.value, review.per_territory[t]) for t in Territory], s),
        Spacer(1, 3 * mm),
        KeepTogether(
            [
                Paragraph("Sensitivity and specificity with 95 % intervals", s["h2"]),
                accuracy_chart(review, fonts, FRAME_WIDTH),
            ]
        ),
        Spacer(1, 2 * mm),
        KeepTogether(
            [
                Paragraph("By reader and by protocol (per patient)", s["h2"]),
                _groups(review, s, limits),
            ]
        ),
    ]
    return story


def _two_by_two(
    table: DiagnosticAccuracy, heading: str, s: dict[str, ParagraphStyle], first: float = 20 * mm
) -> Table:
    data = [
        [Paragraph(f"<b>{heading}</b>", s["cell"]), "Angio +", "Angio −", "Total"],
        [
            "Echo +",
            str(table.true_positive),
            str(table.false_positive),
            str(table.true_positive + table.false_positive),
        ],
        [
            "Echo −",
            str(table.false_negative),
            str(table.true_negative),
            str(table.false_negative + table.true_negative),
        ],
        [
            "Total",
            str(table.true_positive + table.false_negative),
            str(table.false_positive + table.true_negative),
            str(table.total),
        ],
    ]
    out = Table(data, colWidths=[first, 15 * mm, 15 * mm, 11 * mm], hAlign="LEFT")
    out.setStyle(table_style(s, header_rows=1, first_col=True, align_numbers=True))
    return out


def _measures(
    columns: Sequence[tuple[str, DiagnosticAccuracy]], s: dict[str, ParagraphStyle]
) -> Table:
    names = (
        ("Sensitivity", "sensitivity"),
        ("Specificity", "specificity"),
        ("PPV", "ppv"),
        ("NPV", "npv"),
        ("Accuracy", "accuracy"),
    )
    single = len(columns) == 1
    header = (
        ["Measure", "Value", "n / N", "95 % CI"]
        if single
        else ["Measure"] + [n for n, _ in columns]
    )
    rows: list[list[Any]] = [header]
    for label, attr in names:
        row: list[Any] = [label]
        for _, table in columns:
            p: Proportion = getattr(table, attr)
            if single:
                row += [percent(p.value), f"{p.numerator}/{p.denominator}", interval(p)]
            else:
                row.append(f"{percent(p.value)}  ({p.numerator}/{p.denominator}; {interval(p)})")
        rows.append(row)
    if single:
        widths = [24 * mm, 16 * mm, 18 * mm, 24 * mm]
    else:
        rest = (FRAME_WIDTH - 24 * mm) / len(columns)
        widths = [24 * mm] + [rest] * len(columns)
    out = Table(rows, colWidths=widths, hAlign="LEFT")
    out.setStyle(table_style(s, header_rows=1, first_col=True))
    return out


def _groups(review: QualityReview, s: dict[str, ParagraphStyle], limits: _Limits) -> Table:
    rows: list[list[Any]] = [["", "Group", "Studies", "Sensitivity", "Specificity", "Accuracy"]]
    for kind, groups in (("Reader", review.by_reader), ("Protocol", review.by_protocol)):
        # The largest groups when there are too many to show, kept in the review's order.
        largest = sorted(groups, key=lambda g: -g.studies)[: limits.groups_per_kind]
        shown = [g for g in groups if g in largest]
        for i, g in enumerate(shown):
            name = g.group if g.group is not None else "(not recorded)"
            p = g.per_patient
            rows.append(
                [
                    kind if i == 0 else "",
                    Paragraph(style.markup_text(_clip(name, 60), s["cell"].fontName), s["cell"]),
                    str(g.studies),
                    short(p.sensitivity),
                    short(p.specificity),
                    short(p.accuracy),
                ]
            )
        if len(groups) > len(shown):
            rows.append(
                ["", f"… {len(groups) - len(shown)} more in the review JSON", "", "", "", ""]
            )
    if len(rows) == 1:
        rows.append(["", "no analysed studies", "", "", "", ""])
    out = Table(
        rows,
        colWidths=[18 * mm, 52 * mm, 16 * mm, 30 * mm, 30 * mm, FRAME_WIDTH - 146 * mm],
        hAlign="LEFT",
        repeatRows=1,
    )
    out.setStyle(table_style(s, header_rows=1, first_col=True))
    return out


# --- page two -----------------------------------------------------------------------------------


def _page_two(
    review: QualityReview,
    agreement: Agreement | None,
    s: dict[str, ParagraphStyle],
    limits: _Limits,
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
                    style.printable(_clip(d.reader or "—", READER_CHARS), s["cell"].fontName),
                    Paragraph(echo, s["cell"]),
                    Paragraph(angio, s["cell"]),
                    _OUTCOME_TEXT[d.patient_outcome],
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
            f"<b>Without angiography ({len(review.without_angiography)}):</b> {_ids(review.without_angiography, limits)}",
            s["body"],
        ),
        Paragraph(
            f"<b>Non-diagnostic ({len(review.non_diagnostic)}):</b> {_ids(review.non_diagnostic, limits)}",
            s["body"],
        ),
        Paragraph(
            f"<b>Angiography rows without a record ({len(review.angiography_without_record)}):</b> "
            f"{_id_list(review.angiography_without_record, limits)}",
            s["body"],
        ),
    ]
    if agreement is not None:
        story += [Spacer(1, 3 * mm), *_agreement(agreement, s, limits)]
    story += [
        CondPageBreak(30 * mm),
        Spacer(1, 3 * mm),
        Paragraph("Cautions", s["h2"]),
        *[Paragraph(f"• {c}", s["small"]) for c in review.cautions],
        Spacer(1, 2 * mm),
        Paragraph("Sources: " + " ".join(review.sources), s["small"]),
    ]
    return story


def _agreement(
    agreement: Agreement, s: dict[str, ParagraphStyle], limits: _Limits
) -> list[Flowable]:
    readers_a = _names(agreement.readers_a)
    readers_b = _names(agreement.readers_b)
    font = s["body"].fontName
    rows: list[list[Any]] = [
        ["Comparison", "Pairs", "Agreement", "Kappa", "Linear kappa", "Quadratic kappa"]
    ]
    for stage, o in agreement.wall_motion.items():
        rows.append(
            [
                f"Wall motion, {stage.value.replace('_', ' ')}",
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
            [label, str(b.pairs), plain_percent(b.percent_agreement), kappa_text(b.kappa), "", ""]
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
            f"Reader set A: {style.markup_text(readers_a, font)}. Reader set B: "
            f"{style.markup_text(readers_b, font)}. {agreement.matched_studies} studies read by both; "
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


# --- helpers ------------------------------------------------------------------------------------


def _period(review: QualityReview) -> str:
    p = review.period
    if p.first_study_date is None or p.last_study_date is None:
        covered = "no dated study"
    else:
        covered = f"{p.first_study_date.isoformat()} to {p.last_study_date.isoformat()}"
    if p.date_from is None and p.date_to is None:
        return f"{covered} (all dates)"
    asked_from = p.date_from.isoformat() if p.date_from else "start"
    asked_to = p.date_to.isoformat() if p.date_to else "end"
    return f"{covered} (selected {asked_from} to {asked_to})"


def _ids(studies: Sequence[ExcludedStudy], limits: _Limits) -> str:
    return _id_list([e.study_id for e in studies], limits)


def _names(names: Sequence[str], shown: int = 4) -> str:
    if not names:
        return "not recorded"
    text = ", ".join(_clip(n, 40) for n in names[:shown])
    return text + (f" and {len(names) - shown} more" if len(names) > shown else "")


def _clip(text: str, length: int) -> str:
    return text if len(text) <= length else text[: length - 1].rstrip() + "…"


def _id_list(ids: Sequence[str], limits: _Limits) -> str:
    if not ids:
        return "none"
    # Ids read back from records or the CSV are not guaranteed markup-safe: escape them.
    shown = escape(", ".join(ids[: limits.listed_ids]))
    more = len(ids) - limits.listed_ids
    return shown + (f" … and {more} more in the review JSON" if more > 0 else "")


def _text(text: str, fonts: style.Fonts) -> str:
    return style.markup_text(text, fonts.regular)
