"""HL7 v2.5.1 ORU^R01 result message of a released report.

Segments (separated by CR, HL7 v2.5.1 chapter 2): MSH, PID, ORC and OBR carrying the placer and filler order
numbers and the result status (P preliminary, F final, C corrected: from the :class:`Release`), NTE
lines (a superseding version's line first, saying which version it replaces and why, and its
addenda, as its PDF prints them on page 1; then the cautions), then OBX: the conclusion (FT, the PDF's Impression word for word), per stage
the WMSI (NM, DCM 125202) and LVEF (NM, LOINC 10230-1), per stage and segment the wall motion (CWE,
SNOMED CT codes of DICOM CID 3703/3704; observation id the segment's LOINC code where one exists)
and the perfusion score (NM; CWE "Not visualized", DCM 122288, when it was not seen), and the PDF as an encapsulated-data OBX (``^AP^PDF^Base64^…``).

The stage and segment of a result travel in OBX-4 (Observation Sub-ID) as ``<stage>.<segment>``
(stage 1 rest, 2 low dose, 3 peak, 4 recovery; segment 0 for whole-heart values) and in the
observation text. Every free-text value is escaped (``\\F\\ \\S\\ \\T\\ \\R\\ \\E\\``, line breaks as
``\\.br\\`` in FT). The message is written by hand from typed values, which keeps it fast and byte
stable; tests parse it with hl7apy and check it there.
"""

from __future__ import annotations

import base64
import datetime as dt
import logging

from reporting.codes import Code, code, hl7_system
from reporting.interop import words
from reporting.interop.identity import content_digest, interpreter, performer
from reporting.interop.release import Release, ReportState
from reporting.model import STAGE_ORDER, Clinician, Sex, Stage
from reporting.results import Analysis, SegmentResult
from reporting.segments import SegmentModel

log = logging.getLogger(__name__)

SEGMENT_SEPARATOR = "\r"
RESULT_STATUS = {ReportState.PRELIMINARY: "P", ReportState.FINAL: "F"}
"""OBR-25 / OBX-11 result status (HL7 tables 0123 and 0085) [S]; every state that replaces a
released version (:attr:`ReportState.replaces`) is C, a correction."""
_SEX = {Sex.FEMALE: "F", Sex.MALE: "M", Sex.OTHER: "O"}
_ESCAPES = (("\\", "\\E\\"), ("|", "\\F\\"), ("^", "\\S\\"), ("&", "\\T\\"), ("~", "\\R\\"))


def escape(text: str, *, formatted: bool = False) -> str:
    """``text`` with HL7 delimiters escaped; line breaks as ``\\.br\\`` when ``formatted`` (FT)."""
    for raw, escaped in _ESCAPES:
        text = text.replace(raw, escaped)
    lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
    return ("\\.br\\" if formatted else " ").join(lines)


def stage_number(stage: Stage) -> int:
    """1 rest, 2 low dose, 3 peak, 4 recovery: the stage part of OBX-4."""
    return STAGE_ORDER.index(stage) + 1


def _cwe(c: Code, text: str | None = None) -> str:
    return f"{escape(c.value)}^{escape(text or c.meaning)}^{hl7_system(c.scheme)}"


def _ts(value: dt.datetime) -> str:
    return value.strftime("%Y%m%d%H%M%S%z")


def _ndl(person: Clinician | None) -> str:
    """NDL (OBR-32, OBR-34) whose first component, CNN, holds the staff id and the printed name."""
    if person is None:
        return ""
    return f"{escape(person.id or '')}&{escape(person.name)}"


def _number(value: float) -> str:
    return repr(float(value)).removesuffix(".0") if float(value).is_integer() else repr(value)


class _Message:
    def __init__(self, analysis: Analysis, release: Release, at: dt.datetime) -> None:
        self.a = analysis
        self.release = release
        self.status = "C" if release.state.replaces else RESULT_STATUS[release.state]
        self.at = at
        self.segments: list[str] = []
        self.obx_count = 0
        self.observed = analysis.study.date.strftime("%Y%m%d") if analysis.study.date else ""

    def add(self, *fields: str) -> None:
        self.segments.append("|".join(fields).rstrip("|"))

    def obx(self, kind: str, ident: str, sub_id: str, value: str, units: str = "") -> None:
        self.obx_count += 1
        self.add(
            "OBX", str(self.obx_count), kind, ident, sub_id, value, units,
            "", "", "", "", self.status, "", "", self.observed,
        )  # fmt: skip

    def header(self, control_id: str) -> None:
        a = self.a
        lab = escape(a.study.lab or "")
        self.add(
            "MSH", "^~\\&", "segreport", lab, "", "", _ts(self.at), "", "ORU^R01^ORU_R01",
            control_id, "P", "2.5.1", "", "", "", "", "", "UNICODE UTF-8",
        )  # fmt: skip
        p = a.patient
        self.add(
            "PID", "1", "", escape(p.id or ""), "", escape(p.name or ""), "",
            p.birth_date.strftime("%Y%m%d") if p.birth_date else "",
            _SEX[p.sex] if p.sex is not None else "",
        )  # fmt: skip
        order = a.order
        placer = escape(order.placer_order_number or "") if order else ""
        filler = escape(order.filler_order_number or "") if order else ""
        self.add("ORC", "RE", placer, filler)
        reader = interpreter(a)
        if self.release.signer is not None:
            signer = self.release.signer
            reader = Clinician(name=signer.name, id=signer.id)
        title = code("report_title")
        fields = ["OBR", "1", placer, filler, _cwe(title, "Stress echocardiography report")]
        fields += ["", "", self.observed] + [""] * 14
        fields += [_ts(self.at), "", "", self.status]  # OBR-22 status change, OBR-25 status
        fields += [""] * 6 + [_ndl(reader), "", _ndl(performer(a))]  # OBR-32, OBR-34
        self.add(*fields)
        notes = [*words.release_notes(a, self.release), *a.cautions]
        for n, note in enumerate(notes, start=1):
            self.add("NTE", str(n), "L", escape(note))

    def results(self, pdf: bytes | None) -> None:
        a = self.a
        conclusion = escape(words.conclusion_text(a), formatted=True)
        self.obx("FT", _cwe(code("conclusion")), "0.0", conclusion)
        no_units, percent = code("unit.none"), code("unit.percent")
        for stage in a.stages:
            n = stage_number(stage)
            if stage in a.wmsi:
                text = f"LV wall motion score index, {stage.value}"
                self.obx("NM", _cwe(code("wmsi"), text), f"{n}.0", _number(a.wmsi[stage]),
                         _cwe(no_units))  # fmt: skip
            h = a.haemodynamics.get(stage)
            if h is not None and h.lvef_percent is not None:
                text = f"Left ventricular ejection fraction, {stage.value}"
                self.obx("NM", _cwe(code("lvef"), text), f"{n}.0", _number(h.lvef_percent),
                         _cwe(percent))  # fmt: skip
            for seg in a.segments:
                if stage in seg.wall_motion:
                    score = seg.wall_motion[stage]
                    value = code("wall_motion.x" if score is None else f"wall_motion.{score}")
                    self.obx("CWE", self.wall_motion_id(seg, stage), f"{n}.{seg.number}",
                             _cwe(value))  # fmt: skip
            for seg in a.segments:
                if stage not in seg.perfusion:
                    continue
                score = seg.perfusion[stage]
                text = f"Myocardial perfusion score, {seg.name} segment, {stage.value}"
                ident, sub_id = _cwe(code("perfusion"), text), f"{n}.{seg.number}"
                if score is None:  # not visualised: said as a coded value, not left out
                    self.obx("CWE", ident, sub_id, _cwe(code("wall_motion.x")))
                else:
                    self.obx("NM", ident, sub_id, str(score), _cwe(no_units))
        if pdf is not None:
            data = base64.b64encode(pdf).decode("ascii")
            self.obx("ED", _cwe(code("report_title")), "0.0", f"^AP^PDF^Base64^{data}")

    def wall_motion_id(self, seg: SegmentResult, stage: Stage) -> str:
        text = f"Wall motion, {seg.name} segment, {stage.value}"
        if self.a.segment_model is not SegmentModel.EIGHTEEN:
            # The per-segment LOINC codes name 17-segment regions, which the 16-segment model shares.
            return _cwe(code(f"wall_motion_loinc.{seg.name}"), text)
        return _cwe(code("wall_motion"), text)


def oru_message(
    analysis: Analysis,
    pdf: bytes | None,
    release: Release,
    *,
    at: dt.datetime | None = None,
) -> str:
    """The ORU^R01 message as text, segments separated by CR (ending in CR).

    ``at`` is the message time (default: the signing time of a signed release, else now).
    """
    if at is None:
        at = release.signer.signed_at if release.signer else dt.datetime.now(dt.UTC)
    message = _Message(analysis, release, at)
    control_id = content_digest(analysis, pdf or b"", release)[:20]
    message.header(control_id)
    message.results(pdf)
    log.debug("ORU^R01 for %s: %d OBX", analysis.study.id, message.obx_count)
    return SEGMENT_SEPARATOR.join(message.segments) + SEGMENT_SEPARATOR
