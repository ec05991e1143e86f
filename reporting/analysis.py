"""Study → Analysis: the one entry point for computation.

:func:`analyze` applies the scoring rules (``scoring``), the stress indices (``stress``) and the
territory map (``segments``) to a validated :class:`~reporting.model.Study` and returns a frozen
:class:`~reporting.results.Analysis`. It reads no files; :func:`analyze_file` is the convenience that
loads a study, its lab territory map and a lab settings file first.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from functools import cache
from pathlib import Path
from typing import TYPE_CHECKING, Any

from reporting import conclusion, scoring, stress
from reporting.errors import InputError
from reporting.findings import quality_notes, response_notes
from reporting.load import load_study
from reporting.model import STAGE_ORDER, STRESS_STAGES, Protocol, Stage, Study
from reporting.results import (
    RECORD_SCHEMA_VERSION,
    Analysis,
    Note,
    NoteKind,
    PatientSummary,
    PerfusionResult,
    ProcedureSummary,
    SegmentResult,
    StageHaemodynamics,
    StressResult,
    StudyHeader,
    TerritoryMapInfo,
    TerritoryResult,
)
from reporting.scoring import (
    ISCHEMIC_PERFUSION,
    ISCHEMIC_RESPONSES,
    VIABLE_RESPONSES,
    PerfusionResponse,
    SegmentCourse,
    WallMotionResponse,
)
from reporting.segments import (
    BUILT_IN_MAPS,
    SegmentModel,
    Territory,
    TerritoryMap,
    built_in_map,
    load_territory_map,
    segment,
    segments_of,
)
from reporting.settings import Settings, default_settings, load_settings
from reporting.wording import CAUTIONS

if TYPE_CHECKING:
    from reporting.kinetics.curves import CurveSet


Scores = Mapping[int, int | None]


def analyze_file(
    path: Path | str,
    *,
    settings_path: Path | None = None,
    territory_map: str | Path | None = None,
    settings: Settings | None = None,
) -> Analysis:
    """Load the study at ``path`` (and any lab map or settings) and analyse it; ``settings``
    already loaded (a batch loads them once) replace reading ``settings_path``."""
    path = Path(path)
    study = load_study(path)
    if settings is None:
        settings = load_settings(settings_path)
    curves = None
    if study.perfusion_curves is not None:
        from reporting.kinetics import load_curves  # numpy loads only for studies with curves

        curves = load_curves(
            inside_folder(path.parent, study.perfusion_curves, f"{path}: perfusion_curves"),
            segment_model=study.segment_model,
            settings=settings,
        )
    return analyze(
        study,
        settings=settings,
        territory_map=resolve_territory_map(study, path.parent, territory_map, source=str(path)),
        curves=curves,
    )


def load_prior(
    path: Path | str,
    *,
    settings_path: Path | None = None,
    territory_map: str | Path | None = None,
) -> Analysis:
    """The prior study given to ``report --prior``: an analysis record (JSON with
    ``schema_version``) read back, else a study file analysed as :func:`analyze_file` does.

    Read through the bounded readers of :mod:`reporting.documents`; a record is validated against
    the record model and must be of this record format.
    """
    from pydantic import ValidationError

    from reporting.documents import check_suffix, parse_json, read_text

    path = Path(path)
    where = f"--prior {path}"
    if check_suffix(path).suffix.lower() == ".json":
        data = parse_json(read_text(path, what="prior study or record"), str(path))
        if isinstance(data, dict) and "schema_version" in data and "generator" in data:
            if data["schema_version"] != RECORD_SCHEMA_VERSION:
                raise InputError(
                    where,
                    f"record schema_version {data['schema_version']!r} is not supported "
                    f"(this version reads {RECORD_SCHEMA_VERSION})",
                )
            try:
                return Analysis.model_validate(data)
            except ValidationError as exc:
                first = exc.errors()[0]
                field = ".".join(str(p) for p in first["loc"])
                raise InputError(f"{where}: {field}", first["msg"]) from None
    return analyze_file(path, settings_path=settings_path, territory_map=territory_map)


def resolve_territory_map(
    study: Study, base_dir: Path, override: str | Path | None = None, *, source: str = "study"
) -> TerritoryMap:
    """The map named by ``override`` or by the study: a built-in name or a YAML file path."""
    choice = override if override is not None else study.territory_map
    if choice is None:
        return built_in_map("standard")
    if str(choice) in BUILT_IN_MAPS:
        return built_in_map(str(choice))
    if override is None:
        return load_territory_map(inside_folder(base_dir, str(choice), f"{source}: territory_map"))
    where = Path(choice)
    if not where.exists() and not where.suffix:
        raise InputError(
            "--territory-map",
            f"{str(choice)!r} is neither a built-in map ({', '.join(BUILT_IN_MAPS)}) nor a file",
        )
    return load_territory_map(where)


def inside_folder(folder: Path, relative: str, location: str) -> Path:
    """``folder / relative``, refusing a path that leaves ``folder`` (a study names files beside itself)."""
    try:
        candidate = (folder / relative).resolve()
        inside = candidate.is_relative_to(folder.resolve())
    except (OSError, RuntimeError, ValueError) as exc:  # symlink loop, NUL byte, …
        raise InputError(location, f"{relative!r} is not a usable path ({exc})") from None
    if Path(relative).is_absolute() or not inside:
        raise InputError(location, f"{relative!r} must be a path inside the study's folder")
    return candidate


def analyze(
    study: Study,
    *,
    settings: Settings | None = None,
    territory_map: TerritoryMap | None = None,
    curves: CurveSet | None = None,
) -> Analysis:
    """Compute the full analysis of ``study`` (with replenishment kinetics when ``curves`` are given)."""
    settings = settings or default_settings()
    if territory_map is None:
        if study.territory_map not in (None, *BUILT_IN_MAPS):
            raise InputError(
                "territory_map", "a lab-defined map must be loaded first (use analyze_file)"
            )
        territory_map = built_in_map(study.territory_map or "standard")
    model = study.segment_model
    if not territory_map.supports(model):
        raise InputError(
            "territory_map", f"map {territory_map.name!r} has no {int(model)}-segment assignment"
        )

    wall = _scores_by_stage(study, "wall_motion")
    perf = _scores_by_stage(study, "perfusion")
    no_scores: dict[int, int | None] = {}
    rest, low, peak, recovery = (wall.get(s, no_scores) for s in STAGE_ORDER)
    courses = {  # scoring.segment_course of each segment's scores, without a mapping per segment
        n: scoring.course_of(rest.get(n), low.get(n), peak.get(n), recovery.get(n))
        for n in range(1, int(model) + 1)
    }
    segments = _segment_results(study, territory_map, courses, wall, perf)
    wmsi_numbers = _wmsi_segments(model, settings)

    wmsi: dict[Stage, float] = {}
    wmsi_counts: dict[Stage, int] = {}
    for stage, scores in wall.items():
        value, count = scoring.score_index([scores[n] for n in wmsi_numbers])
        if value is not None:
            wmsi[stage], wmsi_counts[stage] = value, count

    in_wmsi = frozenset(wmsi_numbers)
    territories = {t: _territory_result(t, segments, wall, in_wmsi) for t in Territory}
    perfusion = _perfusion_result(segments, perf)
    kinetics = None
    if curves is not None:
        from reporting.kinetics import analyze_kinetics

        kinetics = analyze_kinetics(
            curves,
            segment_model=model,
            territory_of={s.number: s.territory for s in segments},
            perfusion_scores=perf,
            settings=settings,
        )
    stress_result, stress_notes = _stress_result(study, settings)
    answer = conclusion.conclude(study, settings, segments, territories, wmsi, stress_result)
    entry_errors = {n: c.implausible_stages for n, c in courses.items() if c.implausible_stages}
    notes = (
        stress_notes
        + response_notes(study, settings, segments, entry_errors)
        + quality_notes(study, settings, segments, wall, perf)
    )

    analysis = Analysis(
        schema_version=RECORD_SCHEMA_VERSION,
        generator=f"segreport {_version()}",
        study=StudyHeader(
            id=study.study.id,
            date=study.study.date,
            lab=study.study.lab or settings.lab_name,
            lab_address=settings.lab_address,
            lab_logo=settings.lab_logo,
            reader=study.study.reader,
            sonographer=study.study.sonographer,
            referring_physician=study.study.referring_physician,
            report_status=study.study.report_status,
            indication=study.indication,
            comments=study.comments,
            referral_question=study.referral_question,
            impression=study.impression,
            recommendations=study.recommendations,
            other_findings=study.other_findings,
            computed_impression=study.computed_impression,
            impression_basis_sha256=study.impression_basis_sha256,
            kept_notes=list(study.kept_notes),
        ),
        patient=PatientSummary(
            id=study.patient.id,
            name=study.patient.name,
            birth_date=study.patient.birth_date,
            age_years=study.age_years(),
            sex=study.patient.sex,
        ),
        protocol=study.protocol,
        segment_model=model,
        wall_motion_scale=study.wall_motion_scale,
        territory_map=TerritoryMapInfo(
            name=territory_map.name, title=territory_map.title, source=territory_map.source
        ),
        stages=list(study.stages),
        haemodynamics=_haemodynamics(study, stress_result),
        contrast_used=study.contrast is not None,
        contrast_agent=study.contrast.agent if study.contrast else None,
        wmsi=wmsi,
        wmsi_scored_segments=wmsi_counts,
        segments=segments,
        territories=territories,
        perfusion=perfusion,
        kinetics=kinetics,
        stress=stress_result,
        procedure=ProcedureSummary.from_study(study),
        conclusion=answer,
        notes=notes,
        cautions=list(CAUTIONS),
        order=study.order,
    )
    from reporting.impression import with_impression_state

    return with_impression_state(analysis)


def _version() -> str:
    from reporting import __version__

    return __version__


def _scores_by_stage(study: Study, kind: str) -> dict[Stage, dict[int, int | None]]:
    out: dict[Stage, dict[int, int | None]] = {}
    for stage, data in study.stages.items():
        scores = getattr(data, kind)
        if scores is not None:
            out[stage] = {n: scores[n] for n in range(1, int(study.segment_model) + 1)}
    return out


def _wmsi_segments(model: SegmentModel, settings: Settings) -> list[int]:
    numbers = [s.number for s in segments_of(model)]
    if settings.wmsi_excludes_apex and model is SegmentModel.SEVENTEEN:
        numbers.remove(17)
    return numbers


def _segment_results(
    study: Study,
    territory_map: TerritoryMap,
    courses: dict[int, SegmentCourse],
    wall: dict[Stage, dict[int, int | None]],
    perf: dict[Stage, dict[int, int | None]],
) -> list[SegmentResult]:
    no_scores: dict[int, int | None] = {}
    perf_rest, perf_peak = perf.get(Stage.REST, no_scores), perf.get(Stage.PEAK, no_scores)
    assignment = territory_map.assignment[study.segment_model]  # territory_map.territory_of
    results = []
    for seg in segments_of(study.segment_model):
        n = seg.number
        territory = assignment[n]
        course = courses[n]
        fields = {
            "number": n,
            "name": seg.name,
            "ring": seg.ring,
            "territory": territory,
            "shared_supply": _shared_supply(study.segment_model, n, territory),
            "wall_motion": {stage: scores[n] for stage, scores in wall.items()},
            "perfusion": {stage: scores[n] for stage, scores in perf.items()},
            "response": course.response,
            "baseline_stage": course.baseline_stage,
            "ischemia_onset_stage": course.worse_from,
            "perfusion_response": scoring.perfusion_response(perf_rest.get(n), perf_peak.get(n)),
        }
        results.append(_new_segment_result(fields))
    return results


@cache
def _shared_supply(model: SegmentModel, number: int, territory: Territory) -> tuple[Territory, ...]:
    """The other territories that commonly supply segment ``number`` when ``territory`` is its own
    (made once per segment and map territory: the same for every study)."""
    seg = segment(model, number)
    return tuple(sorted({seg.default_territory, *seg.alternative_territories} - {territory}))


# SegmentResult(**fields) less the keyword wrapper of BaseModel.__init__: the same validation,
# a few microseconds less for each of the 16-18 segments of every analysis
_new_segment_result: Callable[[dict[str, Any]], SegmentResult] = (
    SegmentResult.__pydantic_validator__.validate_python
)


# Enum members read in the per-segment loops: a class-attribute read of an enum member costs
# about ten times a global's on Python 3.11.
_FIXED = WallMotionResponse.FIXED
_REVERSIBLE = PerfusionResponse.REVERSIBLE
_PARTIALLY_REVERSIBLE = PerfusionResponse.PARTIALLY_REVERSIBLE
_FIXED_DEFECT = PerfusionResponse.FIXED


def _territory_result(
    territory: Territory,
    segments: list[SegmentResult],
    wall: dict[Stage, dict[int, int | None]],
    wmsi_numbers: frozenset[int],
) -> TerritoryResult:
    mine = [s for s in segments if s.territory is territory]
    numbers = [s.number for s in mine]
    indexed = [n for n in numbers if n in wmsi_numbers]
    wmsi: dict[Stage, float | None] = {}
    counts: dict[Stage, int] = {}
    for stage, scores in wall.items():
        wmsi[stage], counts[stage] = scoring.score_index([scores[n] for n in indexed])
    ischemic: list[int] = []
    viable: list[int] = []
    fixed: list[int] = []
    for s in mine:  # one pass; a biphasic segment is both ischaemic and viable
        if s.response in ISCHEMIC_RESPONSES:
            ischemic.append(s.number)
        if s.response in VIABLE_RESPONSES:
            viable.append(s.number)
        if s.response is _FIXED:
            fixed.append(s.number)
    reversible = [s.number for s in mine if s.perfusion_response in ISCHEMIC_PERFUSION]
    by_perfusion = _numbers_by_perfusion(mine)
    return TerritoryResult(
        segments=numbers,
        ischemic_segments=ischemic,
        ischemic_perfusion_segments=[n for n in reversible if n not in ischemic],
        viable_segments=viable,
        fixed_segments=fixed,
        wmsi=wmsi,
        scored_segments=counts,
        reversible_perfusion_segments=reversible,
        partially_reversible_perfusion_segments=by_perfusion[_PARTIALLY_REVERSIBLE],
        fixed_perfusion_segments=by_perfusion[_FIXED_DEFECT],
        ischemic=bool(ischemic or reversible),
        status=conclusion.territory_status(mine),
    )


def _numbers_by_perfusion(segments: list[SegmentResult]) -> dict[PerfusionResponse, list[int]]:
    """The numbers of the reversible, partially reversible and fixed defects, in segment order."""
    having: dict[PerfusionResponse, list[int]] = {
        _REVERSIBLE: [],
        _PARTIALLY_REVERSIBLE: [],
        _FIXED_DEFECT: [],
    }
    for s in segments:
        if s.perfusion_response in having:
            having[s.perfusion_response].append(s.number)
    return having


def _perfusion_result(
    segments: list[SegmentResult], perf: dict[Stage, dict[int, int | None]]
) -> PerfusionResult:
    extent: dict[Stage, float] = {}
    index: dict[Stage, float] = {}
    counts: dict[Stage, int] = {}
    for stage, scores in perf.items():
        value, count = scoring.score_index(scores.values())
        percent = scoring.defect_extent_percent(scores.values())
        if value is not None and percent is not None:
            index[stage], counts[stage], extent[stage] = value, count, percent
    having = _numbers_by_perfusion(segments)
    return PerfusionResult(
        scored=bool(perf),
        defect_extent_percent=extent,
        score_index=index,
        scored_segments=counts,
        reversible_segments=having[_REVERSIBLE],
        partially_reversible_segments=having[_PARTIALLY_REVERSIBLE],
        fixed_segments=having[_FIXED_DEFECT],
    )


def _stress_result(study: Study, settings: Settings) -> tuple[StressResult, list[Note]]:
    notes: list[Note] = []
    age = study.age_years()
    predicted = (
        stress.age_predicted_max_hr(age, settings.heart_rate_formula) if age is not None else None
    )
    target = predicted * settings.target_heart_rate_fraction if predicted is not None else None
    stress_rates = [
        d.heart_rate_bpm
        for s, d in study.stages.items()
        if s in STRESS_STAGES and d.heart_rate_bpm is not None
    ]
    peak_hr = max(stress_rates) if stress_rates else None
    percent = 100 * peak_hr / predicted if peak_hr is not None and predicted else None
    rate_dependent = study.protocol is not Protocol.VASODILATOR
    verdict = stress.assess_adequacy(
        rate_dependent=rate_dependent,
        stress_imaged=conclusion.stress_imaged(study),
        peak_recorded=Stage.PEAK in study.stages,
        age_years=age,
        peak_hr_bpm=peak_hr,
        predicted_bpm=predicted,
        target_fraction=settings.target_heart_rate_fraction,
    )
    adequate, why = verdict.adequate, verdict.note
    if verdict.age_unknown:
        notes.append(Note(kind=NoteKind.AGE_UNKNOWN, text=why, source=None))

    rpp = {
        s: stress.rate_pressure_product(d.heart_rate_bpm, d.systolic_bp_mmhg)
        for s, d in study.stages.items()
        if d.heart_rate_bpm is not None and d.systolic_bp_mmhg is not None
    }
    duke = risk = None
    ex = study.exercise
    if ex is not None:
        if study.protocol in settings.duke_protocols:
            duke = stress.duke_treadmill_score(
                ex.duration_min, ex.max_st_deviation_mm, ex.angina_index
            )
            risk = stress.duke_risk(duke, settings.duke_low_risk_min, settings.duke_high_risk_max)
        else:
            notes.append(
                Note(
                    kind=NoteKind.DUKE_NOT_APPLICABLE,
                    text=f"The Duke treadmill score is not computed for {study.protocol.value} stress; it was derived on the Bruce treadmill protocol.",
                    source=settings.cited("duke_protocols"),
                )
            )
    recovery = ex.hr_recovery_1min_bpm if ex else None
    result = StressResult(
        age_years=age,
        heart_rate_formula=settings.heart_rate_formula,
        age_predicted_max_hr_bpm=predicted,
        target_hr_bpm=target,
        target_fraction=settings.target_heart_rate_fraction,
        peak_hr_bpm=peak_hr,
        peak_hr_percent_of_predicted=percent,
        heart_rate_target_applies=rate_dependent,
        adequate=adequate,
        adequacy_note=why,
        rate_pressure_product=rpp,
        duke_treadmill_score=duke,
        duke_risk=risk,
        mets=ex.mets if ex else None,
        exercise_duration_min=ex.duration_min if ex else None,
        max_st_deviation_mm=ex.max_st_deviation_mm if ex else None,
        angina_index=ex.angina_index if ex else None,
        hr_recovery_1min_bpm=recovery,
        hr_recovery_abnormal=None
        if recovery is None
        else stress.hr_recovery_abnormal(recovery, settings.hr_recovery_abnormal_max_bpm),
        hr_recovery_abnormal_max_bpm=None
        if recovery is None
        else settings.hr_recovery_abnormal_max_bpm,
        hr_recovery_source=None
        if recovery is None
        else settings.cited("hr_recovery_abnormal_max_bpm"),
    )
    return result, notes


def _haemodynamics(study: Study, result: StressResult) -> dict[Stage, StageHaemodynamics]:
    predicted = result.age_predicted_max_hr_bpm
    return {
        stage: StageHaemodynamics(
            heart_rate_bpm=d.heart_rate_bpm,
            systolic_bp_mmhg=d.systolic_bp_mmhg,
            diastolic_bp_mmhg=d.diastolic_bp_mmhg,
            rate_pressure_product=result.rate_pressure_product.get(stage),
            hr_percent_of_predicted=100 * d.heart_rate_bpm / predicted
            if d.heart_rate_bpm is not None and predicted
            else None,
            dose_ug_kg_min=d.dose_ug_kg_min,
            atropine_mg=d.atropine_mg,
            lvef_percent=d.lvef_percent,
            lv_esv_ml=d.lv_esv_ml,
            symptoms=d.symptoms,
        )
        for stage, d in study.stages.items()
    }
