"""The one declared configuration schema.

A study's ``study.toml`` is read into :class:`Config`. Every field has a default
here, the same default (with the source it comes from) in ``configs/defaults.toml``
and a description; tests hold the three together. Unknown keys are refused with
a "did you mean" suggestion, so a typo never silently falls back to a default.

Each stage receives only its own section (``cfg.switching``, ``cfg.signals`` ...),
which is what lets per-session stages be cached on a hash of what they use.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import tomllib
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from pipeline.errors import ConfigError


def check_time_zone(name: str) -> str:
    """``name`` if it is an IANA time zone this machine knows, else a ValueError."""
    from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

    try:
        ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        raise ValueError(f"unknown IANA time zone {name!r} (e.g. 'Europe/Berlin')") from None
    return name


class StrictModel(BaseModel):
    """Base of every settings section: unknown keys are errors, values are validated."""

    model_config = ConfigDict(extra="forbid", frozen=True, validate_default=True)

    def fingerprint(self) -> str:
        """A short stable hash of the settings, for caching per-session results."""
        text = json.dumps(self.model_dump(mode="json"), sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


# --------------------------------------------------------------------------- study
class StudySettings(StrictModel):
    data_dir: str = Field(".", description="Study folder, relative to the TOML file that names it.")
    name: str = Field("Untitled study", description="Study title shown in the report and deck.")
    timezone: str = Field(
        "UTC",
        description="IANA time zone in which naive session start/end times are read.",
    )
    max_session_hours: float = Field(
        168.0,
        gt=0,
        description="Sessions longer than this many hours are refused as a likely date typo "
        "(sessions over 24 hours are accepted with a warning).",
    )

    @model_validator(mode="after")
    def _known_zone(self) -> "StudySettings":
        check_time_zone(self.timezone)
        return self


class PlatformSettings(StrictModel):
    groups: dict[str, str] = Field(
        default_factory=dict,
        description="Platform vocabulary: each allowed code and the group it belongs to "
        "(e.g. tv = 'screen', magazine = 'print').",
    )
    labels: dict[str, str] = Field(
        default_factory=dict,
        description="Optional readable label per platform code for charts and the report.",
    )


class CodingSettings(StrictModel):
    primary_coder: str | None = Field(
        None,
        description="Coder whose codes `run` uses where a session has several; "
        "default: the first coder in sorted order.",
    )


class SwitchSettings(StrictModel):
    min_bout_s: int = Field(1, ge=1, description="Attention bouts shorter than this are dropped.")
    max_gap_s: int = Field(
        3, ge=0, description="Empty seconds allowed between two bouts of a switch."
    )
    min_multi_minutes: float = Field(
        5.0,
        ge=0,
        description="Below this much multi-platform time a session's switch rate is left empty.",
    )


class DwellSettings(StrictModel):
    censor_at_invalid_signal: bool = Field(
        True,
        description="Treat a bout that borders invalid signal as right-censored, like one "
        "that borders an uncoded gap.",
    )


# ------------------------------------------------------------------------- signals
#: Artifact rules a study may enable (the functions live in pipeline/signals/artifacts.py).
EDA_RULES = ("out_of_range", "flat_line", "jump", "clipping", "motion")


class EdaSettings(StrictModel):
    min_us: float = Field(
        0.05, ge=0, description="Skin conductance below this (µS) is invalid (out_of_range "
        "rule); non-positive conductance always is."
    )
    max_us: float = Field(
        60.0, gt=0, description="Skin conductance above this (µS) is invalid (out_of_range rule)."
    )
    rules: list[str] = Field(
        default_factory=lambda: list(EDA_RULES),
        description="Artifact rules that mark samples invalid, any of: "
        + ", ".join(EDA_RULES) + ".",
    )
    max_slope_us_per_s: float = Field(
        10.0, gt=0, description="A change between successive samples faster than this "
        "(µS/s, either sign) marks both samples invalid (jump rule)."
    )
    flat_window_s: float = Field(
        10.0, gt=0, description="A stretch at least this long (s) whose range stays within "
        "flat_tolerance_us is a flat line (sensor off): invalid."
    )
    flat_tolerance_us: float = Field(
        0.001, ge=0, description="Largest range (max - min, µS) of a flat-line stretch."
    )
    ceiling_us: float | None = Field(
        None, gt=0, description="The sensor's upper range end (µS); readings held within "
        "flat_tolerance_us of it for clip_min_s or longer are clipped. Default: the highest "
        "level the recording holds that long, if hardly any sample lies above it."
    )
    clip_min_s: float = Field(
        2.0, gt=0, description="Readings held at the ceiling at least this long (s) are "
        "clipping: invalid."
    )
    motion_max_g: float = Field(
        0.3, gt=0, description="Accelerometer magnitude deviation from 1 g, averaged over "
        "motion_window_s, above which samples are invalid (motion rule; needs acc_x/y/z)."
    )
    motion_window_s: float = Field(
        1.0, gt=0, description="Averaging window of the motion rule (s)."
    )
    pad_s: float = Field(
        5.0, ge=0, description="Invalid stretches longer than max_interp_s are widened by "
        "this much (s) on each side: transitional data around an artifact."
    )
    lowpass_hz: float = Field(
        3.0, gt=0, description="Cut-off (Hz) of the zero-phase Butterworth low-pass that "
        "cleans skin conductance (lowered to 0.8 x Nyquist for slow recordings)."
    )
    lowpass_order: int = Field(
        2, ge=1, le=8, description="Order of that Butterworth low-pass design (applied "
        "forwards and backwards, so the effective order doubles)."
    )
    analysis_hz: float = Field(
        8.0, gt=0, description="Rate (Hz) at which decomposition and SCR scoring run, after "
        "the low-pass; recordings sampled faster are decimated for these steps only."
    )
    min_valid_share: float = Field(
        0.5,
        ge=0,
        le=1,
        description="A video second is valid when at least this share of its samples is valid.",
    )

    @model_validator(mode="after")
    def _known_rules(self) -> "EdaSettings":
        for rule in self.rules:
            if rule not in EDA_RULES:
                close = difflib.get_close_matches(rule, EDA_RULES, n=1)
                hint = f"; did you mean {close[0]!r}?" if close else ""
                raise ValueError(f"unknown artifact rule {rule!r}{hint} (choose from "
                                 f"{', '.join(EDA_RULES)})")
        if self.min_us >= self.max_us:
            raise ValueError("min_us must be below max_us")
        return self


class ConvexSettings(StrictModel):
    tau_rise_s: float = Field(0.7, gt=0, description="Rise time constant tau1 of the "
                              "Bateman impulse response (s).")
    tau_decay_s: float = Field(2.0, gt=0, description="Decay time constant tau0 of the "
                               "Bateman impulse response (s).")
    knot_s: float = Field(10.0, gt=0, description="Knot spacing of the tonic cubic spline (s).")
    alpha: float = Field(8e-4, gt=0, description="Weight of the sparsity (L1) penalty on the "
                         "phasic driver (signal standardised first).")
    gamma: float = Field(1e-2, ge=0, description="Weight of the ridge penalty on the tonic "
                         "spline coefficients.")
    window_s: float = Field(600.0, gt=0, description="Each window solved on its own (s), so "
                            "memory stays bounded on long recordings.")
    overlap_s: float = Field(60.0, ge=0, description="Context added on each side of a window "
                             "and discarded after solving (s).")
    max_iterations: int = Field(100, ge=5, description="Iteration limit of the "
                                "interior-point solver per window.")


class DecompositionSettings(StrictModel):
    method: str = Field(
        "highpass",
        description="Tonic/phasic decomposition: 'highpass' (fast, default for long "
        "recordings) or 'convex' (model-based, windowed).",
    )
    highpass_hz: float = Field(
        0.05, gt=0, description="Cut-off (Hz) of the zero-phase high-pass giving the phasic "
        "component (method 'highpass')."
    )
    highpass_order: int = Field(
        2, ge=1, le=8, description="Order of that Butterworth high-pass."
    )
    convex: ConvexSettings = Field(
        default_factory=ConvexSettings, description="Settings of method 'convex'."
    )


class ScrSettings(StrictModel):
    method: str = Field(
        "trough_to_peak", description="How SCRs are found and measured: 'trough_to_peak'."
    )
    min_amplitude_us: float = Field(
        0.01, gt=0, description="Smallest SCR amplitude counted (µS); also the smallest dip "
        "that separates two responses."
    )
    min_rise_time_s: float = Field(
        0.25, ge=0, description="A rise from onset to peak quicker than this (s) is a spike "
        "or the low-pass filter's ringing at a steep step, not an SCR."
    )
    max_rise_time_s: float = Field(
        4.0, gt=0, description="A rise from onset to peak slower than this (s) is a change "
        "of tonic level, not an SCR."
    )
    max_half_recovery_s: float = Field(
        20.0, gt=0, description="Half-recovery is searched this long after the peak (s); "
        "NaN when not reached before it, the next SCR or invalid signal."
    )


class HrSettings(StrictModel):
    min_bpm: float = Field(30.0, gt=0, description="Heart rate below this (beats/min) is invalid.")
    max_bpm: float = Field(200.0, gt=0, description="Heart rate above this (beats/min) is invalid.")
    artifact_method: str = Field(
        "malik", description="Successive-difference rule for beats: 'malik' (relative change) "
        "or 'berntson' (criterion from the series' own quartiles)."
    )
    malik_max_change: float = Field(
        0.2, gt=0, lt=1, description="Largest relative change between successive intervals "
        "under rule 'malik'."
    )


class SignalSettings(StrictModel):
    edf_labels: dict[str, str] = Field(
        default_factory=dict,
        description="EDF signal label (or BIDS physio column) -> contract column name "
        "(e.g. 'GSR' = 'eda_us').",
    )
    resample_hz: float | None = Field(
        None, gt=0, description="Rate of the uniform grid each recording is resampled to "
        "(Hz); default: the recording's own median rate."
    )
    max_interp_s: float = Field(
        2.0, ge=0, description="Longest stretch (s) bridged by linear interpolation, both for "
        "gaps between samples and for short artifacts; longer ones stay invalid."
    )
    eda: EdaSettings = Field(default_factory=EdaSettings, description="Skin conductance rules.")
    decomposition: DecompositionSettings = Field(
        default_factory=DecompositionSettings, description="Tonic/phasic decomposition."
    )
    scr: ScrSettings = Field(default_factory=ScrSettings, description="SCR scoring.")
    hr: HrSettings = Field(default_factory=HrSettings, description="Heart rate rules.")


class ArousalSettings(StrictModel):
    source: Literal["eda", "phasic"] = Field(
        "eda",
        description="Signal the arousal z-score is built from: cleaned skin conductance "
        "or its phasic component.",
    )
    min_state_minutes: float = Field(
        10.0,
        ge=0,
        description="Peak, trough and range need at least this many valid minutes of a state.",
    )


class QcSettings(StrictModel):
    min_usable_share: float = Field(
        0.5,
        ge=0,
        le=1,
        description="Sessions with a smaller share of coded seconds with valid signal are "
        "flagged.",
    )
    exclude_flagged_from_models: bool = Field(
        True, description="Leave sessions flagged unusable out of the models."
    )


class CohortSettings(StrictModel):
    reference: str | None = Field(
        None, description="Reference cohort of the models; default: first in sorted order."
    )
    include: list[str] = Field(
        default_factory=list,
        description="Cohorts compared by the models and the survey comparison; empty means "
        "every cohort in the data.",
    )
    min_participants: int = Field(
        3,
        ge=2,
        description="A model is fitted only where every cohort has at least this many "
        "participants with data; otherwise the outcome is reported as not fitted.",
    )


class ModelSettings(StrictModel):
    covariates: list[str] = Field(
        default_factory=list, description="Roster columns added as fixed effects."
    )
    fdr_q: float = Field(
        0.05, gt=0, lt=1, description="False discovery rate for Benjamini-Hochberg."
    )
    fdr_method: str = Field(
        "bh",
        description="Multiple-comparison correction across the family of cohort terms: "
        "'bh' (Benjamini-Hochberg) or 'by' (Benjamini-Yekutieli, any dependence).",
    )
    confidence_level: float = Field(
        0.95, gt=0, lt=1, description="Coverage of the confidence intervals reported."
    )
    df_method: str = Field(
        "between_within",
        description="Degrees of freedom for tests and intervals of fixed effects: "
        "'between_within' (t, participant-level terms get participant degrees of freedom) "
        "or 'normal' (z, large-sample).",
    )
    mixed_fitter: str = Field(
        "profiled_reml",
        description="How the random-intercept mixed models are fitted: 'profiled_reml' "
        "(REML profiled over the fixed effects and the residual variance, a one-dimensional "
        "search over the variance ratio; fast; lme4's standard errors) or 'statsmodels' "
        "(statsmodels MixedLM; standard errors from its full observed Hessian, which differ "
        "slightly from lme4's in unbalanced designs).",
    )
    session_outcomes: list[str] = Field(
        default_factory=lambda: ["switches_per_hour", "media_hours", "multi_share",
                                 "dwell_median_s"],
        description="Session-level outcomes modelled with cohort as fixed effect and a "
        "random intercept per participant ('multi_share' = multi_hours / media_hours; "
        "'dwell_median_s' is modelled once per platform group).",
    )
    log_outcomes: list[str] = Field(
        default_factory=lambda: ["switches_per_hour"],
        description="Session outcomes modelled on the log scale (effects reported as ratios).",
    )
    zero_count_offset: float = Field(
        0.5,
        gt=0,
        description="Where a session has zero switches, the log-scale switch rate uses "
        "(switches + this) / multi_hours for every session, and says so.",
    )
    state_outcomes: list[str] = Field(
        default_factory=lambda: ["arousal_p95", "arousal_p05", "arousal_range",
                                 "arousal_mean", "scr_per_min", "hr_mean_bpm"],
        description="Per-state outcomes modelled as outcome ~ cohort * state with a random "
        "intercept per participant.",
    )
    states: list[str] = Field(
        default_factory=lambda: ["single", "multi"],
        description="States entering the cohort * state models; the first is the reference "
        "state.",
    )
    count_method: str = Field(
        "poisson_gee",
        description="Count model run as a check of the switch-rate comparison: "
        "'poisson_gee' or 'negbin_gee' (log link, log(multi_hours) offset, exchangeable "
        "within participant).",
    )
    gee_cov_type: Literal["robust", "bias_reduced"] = Field(
        "bias_reduced",
        description="Sandwich covariance of the count model: 'robust' or 'bias_reduced' "
        "(small-sample correction for few participants).",
    )
    zero_variance_share: float = Field(
        1e-4,
        ge=0,
        lt=1,
        description="A participant variance below this share of the total variance is "
        "reported as a random-effect variance at zero.",
    )
    survey_method: str = Field(
        "mann_whitney",
        description="Per-item survey comparison: 'mann_whitney' (with rank-biserial r) or "
        "'ordinal_logit' (proportional-odds model).",
    )
    switch_locked_window_s: int = Field(
        60, ge=1, description="Switch-locked arousal is traced this many seconds either side "
        "of each switch."
    )
    switch_locked_pseudo: int = Field(
        200,
        ge=1,
        description="Pseudo-switches placed at random in each session's multi-platform time "
        "as the baseline of the switch-locked trajectory.",
    )
    switch_locked_pre_s: int = Field(
        12,
        ge=2,
        description="Seconds before a switch over which the test asks whether arousal rises "
        "or falls (slope of switch minus pseudo-switch trajectory).",
    )
    min_switch_events: int = Field(
        5,
        ge=1,
        description="Participants with fewer switches with valid arousal are left out of the "
        "switch-locked test, and counted.",
    )


class AgreementSettings(StrictModel):
    switch_tolerance_s: int = Field(
        2,
        ge=0,
        description="Two coders' switches match when this close in time (and same platforms).",
    )
    switch_matching: str = Field(
        "optimal",
        description="How coder B's switches are paired one-to-one with coder A's: 'optimal' "
        "(most pairs, then least total time difference) or 'greedy' (closest pair first).",
    )

    @model_validator(mode="after")
    def _known_matching(self) -> "AgreementSettings":
        from pipeline.agreement.events import MATCHING_METHODS

        if self.switch_matching not in MATCHING_METHODS:
            raise ValueError(f"unknown switch matching method {self.switch_matching!r}; "
                             f"choose one of {', '.join(sorted(MATCHING_METHODS))}")
        return self


class SurveySettings(StrictModel):
    items: list[str] = Field(
        default_factory=list, description="Items analysed; empty means every item seen."
    )
    scale_min: float | None = Field(None, description="Lowest allowed response value.")
    scale_max: float | None = Field(None, description="Highest allowed response value.")


class Config(StrictModel):
    """The whole resolved configuration of a run."""

    study: StudySettings = Field(default_factory=StudySettings, description="The study itself.")
    platforms: PlatformSettings | None = Field(
        None,
        description="Platform vocabulary; absent means every code seen, reported in the summary.",
    )
    coding: CodingSettings = Field(default_factory=CodingSettings, description="Coders.")
    switching: SwitchSettings = Field(
        default_factory=SwitchSettings, description="Attention bouts and switches."
    )
    dwell: DwellSettings = Field(default_factory=DwellSettings, description="Dwell times.")
    signals: SignalSettings = Field(default_factory=SignalSettings, description="Sensor signals.")
    arousal: ArousalSettings = Field(default_factory=ArousalSettings, description="Arousal.")
    qc: QcSettings = Field(default_factory=QcSettings, description="Quality control.")
    cohorts: CohortSettings = Field(default_factory=CohortSettings, description="Cohorts.")
    models: ModelSettings = Field(default_factory=ModelSettings, description="Group models.")
    agreement: AgreementSettings = Field(
        default_factory=AgreementSettings, description="Coder agreement."
    )
    survey: SurveySettings = Field(default_factory=SurveySettings, description="Survey items.")


# --------------------------------------------------------------------------- loading
def _field_names(model: type[BaseModel], loc: tuple[Any, ...]) -> list[str]:
    """Names allowed at ``loc`` (the path of the offending key's parent).

    List positions in ``loc`` are skipped, and ``X | None`` or ``list[X]`` annotations
    are unwrapped to the model ``X``.
    """
    current: Any = model
    for part in loc:
        if isinstance(part, int):
            continue
        fields = getattr(current, "model_fields", None)
        if not fields or part not in fields:
            return []
        ann = fields[part].annotation
        for arg in (getattr(ann, "__args__", None) or (ann,)):
            if isinstance(arg, type) and issubclass(arg, BaseModel):
                ann = arg
        current = ann
    fields = getattr(current, "model_fields", None)
    return list(fields) if fields else []


def explain_validation(err: ValidationError, model: type[BaseModel], source: str,
                       noun: str = "setting") -> ConfigError:
    """One ConfigError naming every bad key of ``err``, with "did you mean" for typos."""
    lines = []
    hints = []
    for e in err.errors():
        loc = tuple(e["loc"])
        key = ".".join(str(p) for p in loc)
        if e["type"] == "extra_forbidden":
            allowed = _field_names(model, loc[:-1])
            close = difflib.get_close_matches(str(loc[-1]), allowed, n=1)
            parent = ".".join(map(str, loc[:-1])) or "top level"
            msg = f"unknown {noun} [{parent}] {loc[-1]!r}"
            if close:
                msg += f"; did you mean {close[0]!r}?"
            lines.append(msg)
            if allowed:
                hints.append(f"allowed here: {', '.join(allowed)}")
        else:
            value = e.get("input")
            lines.append(f"{noun} {key or '(top level)'} = {value!r}: {e['msg']}")
    return ConfigError(f"{source}: " + "; ".join(lines), hint="; ".join(hints) or None)


def parse_config(data: dict[str, Any], source: str = "configuration") -> Config:
    """Validate a dict (as read from TOML) into a :class:`Config`."""
    try:
        return Config.model_validate(data)
    except ValidationError as err:
        raise explain_validation(err, Config, source) from None


def read_toml(path: Path) -> dict[str, Any]:
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{path}: not valid TOML ({err})",
                          hint="check quotes and brackets near the line named") from None
    except OSError as err:
        raise ConfigError(f"{path}: cannot be read ({err.strerror})") from None


def resolve_study(target: str | Path) -> tuple[Path, Config, Path | None]:
    """Turn what the user typed into (study folder, resolved config, config file used).

    ``target`` is a study folder (its ``study.toml`` is read if present) or a
    ``.toml`` file whose ``[study] data_dir`` names the folder relative to the file.
    """
    target = Path(target)
    if target.is_file() and target.suffix == ".toml":
        data = read_toml(target)
        cfg = parse_config(data, str(target))
        folder = (target.parent / cfg.study.data_dir).resolve()
        config_file: Path | None = target
    elif target.is_dir():
        config_file = target / "study.toml"
        if config_file.is_file():
            cfg = parse_config(read_toml(config_file), str(config_file))
        else:
            cfg, config_file = Config(), None
        folder = target.resolve()
    else:
        raise ConfigError(
            f"{target}: no such study folder or .toml file",
            hint="give a study folder (with roster.csv, sessions.csv ...) or a study .toml",
        )
    if not folder.is_dir():
        raise ConfigError(
            f"{config_file}: [study] data_dir = {cfg.study.data_dir!r} is not a folder "
            f"({folder})",
            hint="data_dir is read relative to the .toml file",
        )
    return folder, cfg, config_file


def defaults_file() -> Path:
    """The repository's documented defaults (configs/defaults.toml)."""
    return Path(__file__).resolve().parent.parent / "configs" / "defaults.toml"
