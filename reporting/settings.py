"""The one settings object: every clinical threshold the analysis uses, each with its source.

Defaults come from ``data/thresholds.yaml`` (value and source side by side). A lab overrides any
subset with a YAML file of plain ``name: value`` pairs; unknown names and wrong types are refused with
their location. Settings are immutable: pass a different object, never change one in place.
"""

from functools import cache
from pathlib import Path
from typing import Any, Self

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from reporting.documents import bundled_yaml, read_bytes_limited, read_yaml
from reporting.errors import InputError, InputErrors
from reporting.model import Protocol
from reporting.vocabulary import Vocabulary


class HeartRateFormula(Vocabulary):
    """Formula for the age-predicted maximum heart rate."""

    FOX = "fox"
    """220 − age (Fox 1971)."""
    TANAKA = "tanaka"
    """208 − 0.7 × age (Tanaka 2001)."""


class TerritoryAggregation(Vocabulary):
    """How segment kinetics are combined into a territory reserve."""

    RATIO_OF_MEANS = "ratio_of_means"
    """Mean stress value ÷ mean rest value over the territory's segments with good fits at both."""
    MEAN_OF_RATIOS = "mean_of_ratios"
    """Mean of the segment reserves over the territory's segments with good fits at both."""


class Settings(BaseModel):
    """Thresholds of the analysis. ``sources()`` gives the citation of each."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    heart_rate_formula: HeartRateFormula = Field(
        description="Age-predicted maximum heart rate formula."
    )
    target_heart_rate_fraction: float = Field(
        gt=0, le=1, description="Fraction of the age-predicted maximum that makes stress adequate."
    )
    dobutamine_low_dose_max_ug_kg_min: float = Field(
        gt=0, description="Highest dobutamine dose (μg/kg/min) that counts as low dose."
    )
    low_heart_rate_bpm: float = Field(
        gt=0,
        description="Heart rate (bpm) below which new abnormalities count as low-threshold ischaemia.",
    )
    low_threshold_abnormal_segments_min: int = Field(
        ge=1,
        description="Segments newly abnormal at low dose or low heart rate that make a high-risk finding.",
    )
    extensive_ischemia_segments_min: int = Field(
        ge=1, description="Ischaemic segments from which ischaemia is moderate–severe (extensive)."
    )
    multivessel_territories_min: int = Field(
        ge=2, description="Ischaemic territories from which the pattern is multivessel."
    )
    resting_ef_high_risk_below_percent: float = Field(
        gt=0, lt=100, description="Resting LVEF (%) below which the finding is high risk."
    )
    peak_wmsi_high_risk_above: float = Field(
        ge=1, description="Peak WMSI above which the finding is high risk."
    )
    lv_dilation_high_risk_esv_rise_above_ml: float | None = Field(
        ge=0,
        description="Rise of LV end-systolic volume (mL) from rest to peak above which LV dilation is "
        "a high-risk finding (0, the default: any rise); null: a rise is reported as an abnormal "
        "response only.",
    )
    ef_fall_high_risk_min_points: float = Field(
        gt=0,
        description="Fall of LVEF (percentage points) from rest to peak from which the finding is high risk.",
    )
    peak_exercise_ef_high_risk_below_percent: float = Field(
        gt=0, lt=100, description="Peak exercise LVEF (%) below which the finding is high risk."
    )
    resting_ef_intermediate_below_percent: float = Field(
        gt=0,
        lt=100,
        description="Resting LVEF (%) below which (and from the high-risk cut-off) risk is intermediate.",
    )
    exercise_sbp_fall_high_risk_above_mmhg: float = Field(
        ge=0,
        description="Fall of systolic pressure (mmHg) from the highest exercise value to peak above "
        "which the response is hypotensive (exercise studies only).",
    )
    large_perfusion_defect_percent_min: float = Field(
        gt=0,
        le=100,
        description="Reversible perfusion defects (% of myocardium, one segment = 100 / segments "
        "in the model) from which the defect is large (high risk).",
    )
    moderate_perfusion_defect_percent_min: float = Field(
        gt=0,
        le=100,
        description="Reversible perfusion defects (% of myocardium) from which (below the large "
        "cut-off) risk is intermediate.",
    )
    duke_low_risk_min: float = Field(description="Duke treadmill score from which risk is low.")
    duke_high_risk_max: float = Field(description="Duke treadmill score up to which risk is high.")
    duke_protocols: tuple[Protocol, ...] = Field(
        description="Protocols for which the Duke treadmill score is computed."
    )
    viability_biphasic_segments_min: int = Field(
        ge=1, description="Biphasic segments from which recovery of global function is likely."
    )
    contrast_suggest_contiguous_not_visualised_min: int = Field(
        ge=2,
        description="Contiguous non-visualised segments from which an enhancing agent is suggested.",
    )
    low_mi_max: float = Field(
        gt=0, description="Highest mechanical index counted as low-MI perfusion imaging."
    )
    hr_recovery_abnormal_max_bpm: float = Field(
        description="Fall in heart rate (bpm) in the first minute of recovery at or below which recovery is abnormal."
    )
    lab_name: str | None = Field(
        max_length=200, description="Lab name for report headers when a study names none."
    )
    lab_address: str | None = Field(
        max_length=300, description="Lab address or contact line for report headers."
    )
    lab_logo: str | None = Field(
        default=None,
        max_length=1000,
        description="The lab's logo for the PDF letterhead: a PNG or SVG file, its path relative to "
        "the settings file (checked when the settings are loaded).",
    )
    lab_uid_root: str | None = Field(
        default=None,
        max_length=40,
        pattern=r"^[1-9][0-9]*(\.(0|[1-9][0-9]*))*$",
        description="The lab's registered DICOM UID root; new UIDs go under it (else 2.25.<UUID>).",
    )
    lab_code_system_uri: str | None = Field(
        default=None,
        max_length=200,
        description="FHIR system URI of the lab's own code system (lab-local codes); without it those codes travel as text only.",
    )
    phrases_file: str | None = Field(
        default=None,
        max_length=500,
        description="The lab's phrase library (YAML) for the entry page, relative to the settings "
        "file; `segreport serve --phrases` overrides it; without either, the built-in starter set.",
    )
    lab_identifier_system_uri: str | None = Field(
        default=None,
        max_length=200,
        description="FHIR system URI base for the lab's identifiers (report, observations, orders); without it identifiers carry a value only.",
    )
    wmsi_excludes_apex: bool = Field(
        description="Leave the apical cap (segment 17) out of WMSI, keeping it for perfusion."
    )
    kinetics_db_to_linear_divisor: float = Field(
        gt=0,
        description="Log-compressed curves: linear intensity = 10^(dB / divisor); 10 power-like, 20 amplitude-like.",
    )
    kinetics_min_frames: int = Field(
        ge=4, description="Fewest post-flash frames a replenishment curve needs to be fitted."
    )
    kinetics_beta_min_per_s: float = Field(
        gt=0, description="Lower bound of the fitted replenishment rate β (1/s)."
    )
    kinetics_beta_max_per_s: float = Field(
        gt=0, description="Upper bound of the fitted replenishment rate β (1/s)."
    )
    kinetics_min_r_squared: float = Field(
        ge=0,
        le=1,
        description="R² below which a replenishment fit is poor and left out of reserve.",
    )
    kinetics_rest_replenishment_max_s: float = Field(
        gt=0, description="Usual upper bound of the time to 90 % of plateau at rest (s)."
    )
    kinetics_peak_replenishment_max_s: float = Field(
        gt=0, description="Usual upper bound of the time to 90 % of plateau at peak stress (s)."
    )
    kinetics_a_beta_reserve_min: float = Field(
        gt=0, description="Segment A·β (flow) reserve below which it is flagged as reduced."
    )
    kinetics_territory_flow_reserve_min: float = Field(
        gt=0, description="Territory A·β (flow) reserve below which it is flagged as reduced."
    )
    kinetics_beta_reserve_min: float = Field(
        gt=0, description="β reserve (segment or territory) below which it is flagged as reduced."
    )
    kinetics_territory_aggregation: TerritoryAggregation = Field(
        description="How segment kinetics are combined into a territory reserve."
    )
    session_idle_minutes: int = Field(
        default=15,
        ge=1,
        le=24 * 60,
        description="Lab mode (`serve --db`): minutes without a request after which a signed-in "
        "session ends and the user signs in again (automatic logoff).",
    )
    session_max_hours: int = Field(
        default=12,
        ge=1,
        le=7 * 24,
        description="Lab mode (`serve --db`): hours after sign-in at which a session ends however "
        "active it is (absolute timeout), so a stolen or forgotten session cannot live on.",
    )
    lockout_failures: int = Field(
        default=5,
        ge=1,
        description="Wrong passwords in a row (sign-in and signing) that lock an account.",
    )
    lockout_minutes: int | None = Field(
        default=15,
        ge=1,
        description="Minutes an account stays locked after too many wrong passwords (an admin may "
        "unlock it sooner); null: locked until an admin unlocks it.",
    )
    sign_in_throttle_failures: int = Field(
        default=20,
        ge=1,
        description="Lab mode: failed sign-ins from one network address within the throttle window "
        "after which that address waits (429) before trying again.",
    )
    sign_in_throttle_minutes: int = Field(
        default=10,
        ge=1,
        description="Lab mode: the window (minutes) over which failed sign-ins per address are "
        "counted, and the longest wait it imposes.",
    )

    @model_validator(mode="after")
    def _kinetics_beta_bounds(self) -> Self:
        if self.kinetics_beta_min_per_s >= self.kinetics_beta_max_per_s:
            raise ValueError("kinetics_beta_min_per_s must be below kinetics_beta_max_per_s")
        return self

    @field_validator("lab_code_system_uri", "lab_identifier_system_uri")
    @classmethod
    def _real_system_uri(cls, value: str | None) -> str | None:
        if value is not None and not _is_real_uri(value):
            raise ValueError(
                "must be an absolute http(s) or urn: URI the lab controls, not a placeholder; "
                f"got {value!r}"
            )
        return value

    def cited(self, name: str) -> str:
        """The source of setting ``name``; a lab's own value says so and keeps the default's source."""
        source = _sources()[name]
        value, default = getattr(self, name), getattr(default_settings(), name)
        if value == default:
            return source
        return (
            f"Lab setting {name} = {_shown(value)} (published default {_shown(default)}: {source})"
        )

    @staticmethod
    def sources() -> dict[str, str]:
        """The published source of each default, by setting name."""
        return dict(_sources())


_PLACEHOLDER_HOSTS = (".invalid", ".example", ".test", ".localhost", "example.com", "example.org")


def _is_real_uri(value: str) -> bool:
    """An absolute http(s)/urn URI whose host is not a reserved placeholder (RFC 2606)."""
    if value.startswith("urn:"):
        return len(value) > 4 and " " not in value
    scheme, sep, rest = value.partition("://")
    host = rest.split("/", 1)[0].lower()
    return (
        bool(sep)
        and scheme in ("http", "https")
        and "." in host
        and " " not in value
        and not any(host == h.lstrip(".") or host.endswith(h) for h in _PLACEHOLDER_HOSTS)
    )


def _shown(value: Any) -> str:
    if isinstance(value, tuple | list):
        return ", ".join(str(v) for v in value)
    return str(value)


@cache
def _defaults_file() -> dict[str, dict[str, Any]]:
    data: dict[str, dict[str, Any]] = bundled_yaml("reporting.data", "thresholds.yaml")
    return data


@cache
def _sources() -> dict[str, str]:
    """:meth:`Settings.sources`, read once (every cited note asks for it)."""
    return {name: entry["source"] for name, entry in _defaults_file().items()}


@cache
def default_settings() -> Settings:
    """The published defaults."""
    return Settings.model_validate(
        {name: entry["value"] for name, entry in _defaults_file().items()}
    )


LOGO_MAX_BYTES = 512 * 1024
"""Largest logo file read (a letterhead logo is a few kilobytes)."""
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_SVG_REFUSED = (
    b"<!doctype",
    b"<!entity",
    b'href="http',
    b"href='http",
    b'href="file',
    b"href='file",
)


class LogoKind(Vocabulary):
    """Image formats a lab logo may have."""

    PNG = "png"
    SVG = "svg"


def read_logo(path: Path) -> bytes:
    """The bytes of the logo at ``path``, read with a size bound; any failure is located there."""
    return read_bytes_limited(path, what="logo image", max_bytes=LOGO_MAX_BYTES)


def check_logo(data: bytes, path: Path) -> LogoKind:
    """The format of logo ``data``: a PNG, or an SVG that names no document type, entity or
    outside resource (it is drawn from the file alone). Anything else is an :class:`InputError`."""
    if data.startswith(PNG_SIGNATURE):
        return LogoKind.PNG
    head = data[:4096].lstrip(b"\xef\xbb\xbf \t\r\n").lower()
    if head.startswith((b"<?xml", b"<svg")) and b"<svg" in data[:4096].lower():
        lowered = data.lower()
        refused = [m.decode() for m in _SVG_REFUSED if m in lowered]
        if refused:
            raise InputError(
                str(path), f"the SVG logo uses {', '.join(refused)}; a logo must be self-contained"
            )
        return LogoKind.SVG
    raise InputError(str(path), "a lab logo is a PNG or SVG image; this file is neither")


def load_settings(path: Path | None) -> Settings:
    """Defaults overridden by the lab settings file at ``path`` (``None``: the defaults)."""
    if path is None:
        return default_settings()
    overrides = read_yaml(path, what="settings file")
    if overrides is None:
        return default_settings()
    if not isinstance(overrides, dict):
        raise InputError(str(path), "a settings file is a mapping of setting name -> value")
    merged = default_settings().model_dump() | overrides
    if isinstance(merged.get("lab_logo"), str):
        # a logo path is relative to the settings file; the image itself is checked here, so a
        # bad logo is an error located at the setting, before any report is made
        logo = path.parent / merged["lab_logo"]
        check_logo(read_logo(logo), logo)
        merged["lab_logo"] = str(logo.resolve())
    try:
        return Settings.model_validate(merged)
    except ValidationError as exc:
        from reporting.load import located_problem

        raise InputErrors([located_problem(e, str(path)) for e in exc.errors()]) from None
