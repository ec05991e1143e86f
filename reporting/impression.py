"""The reader's impression and the computed findings it was written against.

The computed narrative is a draft; the reader accepts, edits or replaces it, and the study file then
keeps the reader's ``impression``/``recommendations`` beside ``impression_basis_sha256``: the SHA-256
of the findings the reader saw. When the scores change afterwards, the hash of the findings computed
now differs, the record's ``impression_status`` reads ``stale`` and the PDF says the impression was
written against earlier findings, until the reader confirms it again (:func:`confirm_impression`).
The store refuses to sign while :func:`impression_is_stale` is true.

What is hashed (basis version 1, :func:`findings_basis`): a JSON object of the findings, not of their
wording, so a release that only rewords sentences keeps impressions current:

- ``basis``: the string ``"segreport-findings-1"``;
- ``segment_model``: 16, 17 or 18;
- ``segments``: per segment in number order ``{"number", "response", "perfusion_response",
  "wall_motion": {stage: score|null}, "perfusion": {stage: score|null}}``;
- ``territories``: ``{territory: status}``;
- ``perfusion``: reversible, partially reversible and fixed segment lists;
- ``stress_adequate``: true, false or null;
- ``conclusion``: status, non-diagnostic reason, ischaemic segments and territories, extent,
  multivessel, wrap-around, viable, fixed and akinetic-to-dyskinetic segments, the risk band and the
  sorted codes of its criteria and of the high-risk findings.

Every value is a string, an integer, a boolean or null (no floats, so no platform rounding); the
object is serialised with ``json.dumps(sort_keys=True, separators=(",", ":"), ensure_ascii=True)``
and hashed as UTF-8. The key order of the study file, the order of its stages and any free text
do not enter the hash.

:func:`findings_sha256` runs for every analysis, so it does not build that object and call
``json.dumps``: :func:`canonical_text` writes the same characters directly (keys in sorted order,
enum values as written, the strings escaped by the ``json`` module's own ASCII escaper). Tests
compare the two forms over generated analyses; :func:`findings_basis` and :func:`canonical_bytes`
stay the definition.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterable
from functools import lru_cache
from json.encoder import encode_basestring_ascii
from operator import attrgetter
from typing import Any

from reporting.model import Stage, Study
from reporting.results import Analysis, ImpressionStatus

BASIS_VERSION = "segreport-findings-1"


def findings_basis(analysis: Analysis) -> dict[str, Any]:
    """The canonical findings that an impression is written against (see the module text)."""
    c = analysis.conclusion
    p = analysis.perfusion
    return {
        "basis": BASIS_VERSION,
        "segment_model": int(analysis.segment_model),
        "segments": [
            {
                "number": s.number,
                "response": s.response.value,
                "perfusion_response": s.perfusion_response.value
                if s.perfusion_response is not None
                else None,
                "wall_motion": {k.value: v for k, v in s.wall_motion.items()},
                "perfusion": {k.value: v for k, v in s.perfusion.items()},
            }
            for s in sorted(analysis.segments, key=lambda s: s.number)
        ],
        "territories": {t.value: r.status.value for t, r in analysis.territories.items()},
        "perfusion": {
            "reversible": sorted(p.reversible_segments),
            "partially_reversible": sorted(p.partially_reversible_segments),
            "fixed": sorted(p.fixed_segments),
        },
        "stress_adequate": analysis.stress.adequate,
        "conclusion": {
            "status": c.status.value,
            "non_diagnostic_reason": c.non_diagnostic_reason.value
            if c.non_diagnostic_reason is not None
            else None,
            "ischemic_segments": sorted(c.ischemic_segments),
            "ischemic_territories": sorted(t.value for t in c.ischemic_territories),
            "ischemia_extent": c.ischemia_extent.value,
            "multivessel": c.multivessel,
            "wrap_around_segments": sorted(c.wrap_around_segments),
            "viable_segments": sorted(c.viable_segments),
            "fixed_segments": sorted(c.fixed_segments),
            "akinetic_to_dyskinetic_segments": sorted(c.akinetic_to_dyskinetic_segments),
            "risk": c.risk.value,
            "risk_criteria": sorted(r.code.value for r in c.risk_criteria),
            "high_risk_findings": sorted(f.code.value for f in c.high_risk_findings),
        },
    }


def canonical_bytes(basis: dict[str, Any]) -> bytes:
    """The exact bytes hashed: sorted keys, no spaces, ASCII escapes."""
    return json.dumps(basis, sort_keys=True, separators=(",", ":"), ensure_ascii=True).encode()


def findings_sha256(analysis: Analysis) -> str:
    """SHA-256 (lower-case hex) of the canonical findings of ``analysis``."""
    return hashlib.sha256(canonical_text(analysis).encode("ascii")).hexdigest()


def canonical_text(analysis: Analysis) -> str:
    """``canonical_bytes(findings_basis(analysis))`` as text, written without the intermediate
    object (it runs for every analysis; about a third of the time of building that object and
    serialising it with ``json.dumps``).

    Each object's keys are written here in sorted order and the stage and territory keys sorted
    (enum members compare as their values). The values are the validated fields of the analysis:
    plain ``int``, ``bool`` and ``None`` (pydantic turns a ``true`` score into ``1``), and string
    enum members, escaped by the ``json`` module's own ASCII escaper; floats never enter.
    """
    c = analysis.conclusion
    p = analysis.perfusion
    segments = ",".join(
        [
            _segment_text(
                s.number,
                s.response,
                s.perfusion_response,
                tuple(s.wall_motion.items()),
                tuple(s.perfusion.items()),
            )
            for s in sorted(analysis.segments, key=_NUMBER)
        ]
    )
    territories = ",".join(
        [f"{_quoted(t)}:{_quoted(r.status)}" for t, r in sorted(analysis.territories.items())]
    )
    return (
        f'{{"basis":{_quoted(BASIS_VERSION)},"conclusion":{{'
        f'"akinetic_to_dyskinetic_segments":{_ints(c.akinetic_to_dyskinetic_segments)},'
        f'"fixed_segments":{_ints(c.fixed_segments)},'
        f'"high_risk_findings":{_texts(f.code for f in c.high_risk_findings)},'
        f'"ischemia_extent":{_quoted(c.ischemia_extent)},'
        f'"ischemic_segments":{_ints(c.ischemic_segments)},'
        f'"ischemic_territories":{_texts(c.ischemic_territories)},'
        f'"multivessel":{_FLAG[c.multivessel]},'
        f'"non_diagnostic_reason":{_text(c.non_diagnostic_reason)},'
        f'"risk":{_quoted(c.risk)},'
        f'"risk_criteria":{_texts(r.code for r in c.risk_criteria)},'
        f'"status":{_quoted(c.status)},'
        f'"viable_segments":{_ints(c.viable_segments)},'
        f'"wrap_around_segments":{_ints(c.wrap_around_segments)}}},'
        f'"perfusion":{{"fixed":{_ints(p.fixed_segments)},'
        f'"partially_reversible":{_ints(p.partially_reversible_segments)},'
        f'"reversible":{_ints(p.reversible_segments)}}},'
        f'"segment_model":{int(analysis.segment_model)},"segments":[{segments}],'
        f'"stress_adequate":{_FLAG[analysis.stress.adequate]},"territories":{{{territories}}}}}'
    )


_NUMBER = attrgetter("number")
_quoted = encode_basestring_ascii  # '"value"', with json.dumps(ensure_ascii=True)'s escapes
_FLAG = {True: "true", False: "false", None: "null"}


def _text(value: str | None) -> str:
    return "null" if value is None else _quoted(value)


def _ints(values: Iterable[int]) -> str:
    return f"[{','.join(map(str, sorted(values)))}]"


def _texts(values: Iterable[str]) -> str:
    return f"[{','.join(map(_quoted, sorted(values)))}]"


@lru_cache(maxsize=8192)
def _segment_text(
    number: int,
    response: str,
    perfusion_response: str | None,
    wall_motion: tuple[tuple[Stage, int | None], ...],
    perfusion: tuple[tuple[Stage, int | None], ...],
) -> str:
    # Cached: most segments of most studies share a few patterns (normal at every stage, say).
    return (
        f'{{"number":{number},"perfusion":{_scores(perfusion)},'
        f'"perfusion_response":{_text(perfusion_response)},'
        f'"response":{_quoted(response)},"wall_motion":{_scores(wall_motion)}}}'
    )


def _scores(items: tuple[tuple[Stage, int | None], ...]) -> str:
    """``{"peak":2,"rest":1}``: scores per stage, stages in sorted order, null = not seen."""
    pairs = [f"{_quoted(k)}:{'null' if v is None else v}" for k, v in sorted(items)]
    return f"{{{','.join(pairs)}}}"


def impression_status(analysis: Analysis) -> ImpressionStatus:
    """Compare the study's basis hash with the findings computed now."""
    study = analysis.study
    basis = study.impression_basis_sha256
    if basis is None:
        written = bool((study.impression or "").strip() or (study.recommendations or "").strip())
        return ImpressionStatus.UNCONFIRMED if written else ImpressionStatus.NONE
    return ImpressionStatus.CURRENT if basis == analysis.findings_sha256 else ImpressionStatus.STALE


def with_impression_state(analysis: Analysis) -> Analysis:
    """``analysis`` with its impression status filled in.

    The findings hash is made (and kept on the analysis) only when the study holds a basis to
    compare it with; the computed impression text is made when first read (see
    :class:`~reporting.results.Analysis`).
    """
    status = impression_status(analysis)
    if status is ImpressionStatus.NONE:
        return analysis
    if status is ImpressionStatus.STALE:
        import logging  # here: the one message of this module, and not every analysis needs logging

        logging.getLogger(__name__).info(
            "%s: the reader's impression was written against earlier findings", analysis.study.id
        )
    # model_copy carries the hash already made (it lives in the instance's __dict__)
    return analysis.model_copy(update={"impression_status": status})


def impression_is_stale(analysis: Analysis) -> bool:
    """True when the reader's impression was written against findings that have changed since.

    The one test the store and the entry page use before signing.
    """
    return analysis.impression_status is ImpressionStatus.STALE


def needs_confirmation(analysis: Analysis) -> bool:
    """True when the reader wrote words that are stale or were never confirmed."""
    return analysis.impression_status in (ImpressionStatus.STALE, ImpressionStatus.UNCONFIRMED)


def confirm_impression(study: Study, analysis: Analysis) -> Study:
    """``study`` with the impression confirmed against ``analysis`` (the analysis of that study).

    Sets ``impression_basis_sha256`` to the findings hash and ``computed_impression`` to the
    computed findings text the reader confirmed against.
    """
    if analysis.study.id != study.study.id:
        raise ValueError(f"analysis of {analysis.study.id} does not belong to {study.study.id}")
    return study.model_copy(
        update={
            "impression_basis_sha256": analysis.findings_sha256,
            "computed_impression": analysis.computed_impression,
        }
    )
