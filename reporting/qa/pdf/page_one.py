"""Page one of the quality PDF: the period and the accounting of every record, the per-patient and
per-territory 2×2 tables, the five measures with their Wilson intervals, the chart of sensitivity
and specificity by territory, and the breakdown by reader and protocol.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.platypus import Flowable, KeepTogether, Paragraph, Spacer, Table

from reporting.qa.chart import accuracy_chart
from reporting.qa.layout import interval, number, percent, short, side_by_side, table_style
from reporting.qa.metrics import DiagnosticAccuracy, Proportion
from reporting.qa.pdf.page import FRAME_WIDTH, Limits, clip, free_text, period
from reporting.qa.review import QualityReview
from reporting.render import safe_text
from reporting.render.fonts import Fonts
from reporting.segments import Territory


def page_one(
    review: QualityReview, s: dict[str, ParagraphStyle], fonts: Fonts, limits: Limits
) -> list[Flowable]:
    c = review.counts
    labs = "; ".join(review.labs) if review.labs else "lab not recorded"
    story: list[Flowable] = [
        Paragraph("Stress echo quality review", s["title"]),
        Paragraph(free_text(labs, fonts), s["muted"]),
        Spacer(1, 3 * mm),
        Paragraph(f"<b>Period covered:</b> {period(review)}.", s["body"]),
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
            f"{c.without_angiography}, viability-only {c.viability_only}, non-diagnostic "
            f"{c.non_diagnostic}, outside the period {c.outside_period}. Viability-only and "
            "non-diagnostic studies are kept out of the accuracy figures. Intervals are Wilson "
            "95 % intervals.",
            s["body"],
        ),
        Spacer(1, 3 * mm),
        Paragraph("Per patient", s["h2"]),
        side_by_side(
            two_by_two(review.per_patient, "Patients", s),
            measures([("", review.per_patient)], s),
        ),
        Spacer(1, 3 * mm),
        Paragraph("Per territory", s["h2"]),
        side_by_side(
            *[two_by_two(review.per_territory[t], t.value, s, 14 * mm) for t in Territory],
            gap=5 * mm,
        ),
        Spacer(1, 2 * mm),
        measures([(t.value, review.per_territory[t]) for t in Territory], s),
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
                groups(review, s, limits),
            ]
        ),
    ]
    return story


def two_by_two(
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


def measures(
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


def groups(review: QualityReview, s: dict[str, ParagraphStyle], limits: Limits) -> Table:
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
                    Paragraph(safe_text.markup_text(clip(name, 60), s["cell"].fontName), s["cell"]),
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
