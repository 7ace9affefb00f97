"""Every knob of the synthetic study generator, declared once.

:class:`SynthOptions` is the whole description of a synthetic study; a study is a
deterministic function of it (``seed`` included). :class:`CohortBehaviour` is the
behaviour object of one cohort: how a session alternates single- and
multi-platform stretches and how attention moves between the platforms in view.
It is what :func:`synthetic_diaries.codes.simulate_session_codes` takes, so the
power analysis can simulate media codes of a cohort without any signals.

All numbers here describe our own invented scenario. Where a default follows a
published typical value, the field's description names the source.
"""

from __future__ import annotations

import datetime as dt
import re
import tomllib
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from pipeline.config import check_time_zone, explain_validation
from pipeline.errors import ConfigError

#: Participant, session and cohort IDs follow the study data contract's ID rule.
ID_RE = re.compile(r"[A-Za-z0-9_-]{1,64}")

#: Our scenario's platform vocabulary: code -> group.
DEFAULT_PLATFORM_GROUPS: dict[str, str] = {
    "tv": "screen",
    "phone": "screen",
    "tablet": "screen",
    "laptop": "screen",
    "console": "screen",
    "magazine": "print",
    "newspaper": "print",
    "book": "print",
}

DEFAULT_PLATFORM_LABELS: dict[str, str] = {
    "tv": "Television",
    "phone": "Smartphone",
    "tablet": "Tablet",
    "laptop": "Laptop",
    "console": "Game console",
    "magazine": "Magazine",
    "newspaper": "Newspaper",
    "book": "Book",
}


class _Strict(BaseModel):
    """Base of every options section: unknown keys are refused, defaults validated."""

    model_config = ConfigDict(extra="forbid", validate_default=True)


def _positive_weights(weights: dict[str, float], what: str) -> dict[str, float]:
    if not weights:
        raise ValueError(f"{what} needs at least one platform")
    if any(w < 0 for w in weights.values()) or sum(weights.values()) <= 0:
        raise ValueError(f"{what} weights must be >= 0 with a positive sum")
    return weights


class CohortBehaviour(_Strict):
    """How the participants of one cohort use media in a session (the behaviour object).

    A session is a sequence of *stretches* (minutes long). Each stretch is, with the
    probabilities below, multi-platform (an anchor platform plus one or two companion
    platforms in view), nothing in view, or single-platform (one platform in view).
    Stretch lengths are gamma distributed with the given means.

    Within a multi-platform stretch attention alternates between the platforms in
    view: attention bouts have lengths drawn from ``bout_distribution`` with mean
    ``bout_mean_s`` (divided by the participant's switch-rate multiplier); each bout
    goes to a different in-view platform than the one before; between two bouts there
    are, with probability ``gap_probability``, a few seconds with nothing attended
    (geometric, mean ``gap_mean_s``). Within a single-platform stretch attention stays
    on the platform except for look-aways (nothing attended), a Poisson process at
    ``lookaway_rate_per_min`` with geometric lengths of mean ``lookaway_mean_s``.
    """

    name: str = Field(..., description="Cohort name, as written to roster.csv (ID rule).")
    multi_probability: float = Field(
        0.45, ge=0, le=1, description="Probability that a stretch is multi-platform."
    )
    none_probability: float = Field(
        0.05, ge=0, le=1, description="Probability that a stretch has nothing in view."
    )
    single_stretch_mean_min: float = Field(
        6.0, gt=0, description="Mean length of a single-platform stretch (minutes)."
    )
    multi_stretch_mean_min: float = Field(
        8.0, gt=0, description="Mean length of a multi-platform stretch (minutes)."
    )
    none_stretch_mean_min: float = Field(
        1.5, gt=0, description="Mean length of a stretch with nothing in view (minutes)."
    )
    stretch_shape: float = Field(
        2.0, gt=0, description="Gamma shape of stretch lengths (1 = exponential)."
    )
    bout_distribution: str = Field(
        "lognormal",
        description="Distribution of attention bout lengths in multi-platform time: "
        "'lognormal' or 'gamma'.",
    )
    bout_mean_s: float = Field(
        30.0,
        gt=1,
        description="Mean attention bout length in multi-platform time (s). Our scenario: "
        "about 1-3 switches per minute, milder than the over 4 per minute between TV and "
        "computer seen by Brasel & Gips (2011).",
    )
    bout_shape: float = Field(
        0.8,
        gt=0,
        description="Shape of the bout distribution: sigma of log length for 'lognormal', "
        "shape k for 'gamma'.",
    )
    gap_probability: float = Field(
        0.25, ge=0, le=1,
        description="Probability of unattended seconds between two multi-platform bouts.",
    )
    gap_mean_s: float = Field(
        2.0, ge=1, description="Mean length of such an unattended gap (s, geometric, >= 1)."
    )
    lookaway_rate_per_min: float = Field(
        0.3, ge=0, description="Look-aways (nothing attended) per minute in single-platform time."
    )
    lookaway_mean_s: float = Field(
        3.0, ge=1, description="Mean look-away length (s, geometric, >= 1)."
    )
    third_platform_probability: float = Field(
        0.1, ge=0, le=1,
        description="Probability that a multi-platform stretch has a second companion in view.",
    )
    single_platforms: dict[str, float] = Field(
        default_factory=lambda: {"tv": 0.5, "laptop": 0.12, "console": 0.05, "book": 0.12,
                                 "magazine": 0.1, "newspaper": 0.11},
        description="Platform of a single-platform stretch: code -> relative weight.",
    )
    multi_anchors: dict[str, float] = Field(
        default_factory=lambda: {"tv": 0.75, "laptop": 0.15, "console": 0.1},
        description="Anchor platform of a multi-platform stretch: code -> relative weight.",
    )
    multi_companions: dict[str, float] = Field(
        default_factory=lambda: {"phone": 0.55, "tablet": 0.2, "magazine": 0.1,
                                 "newspaper": 0.08, "book": 0.07},
        description="Companion platform(s) of a multi-platform stretch: code -> relative "
        "weight (the anchor itself is never drawn).",
    )
    compression_factor: float = Field(
        0.7, gt=0,
        description="Multi-state spread of tonic arousal as a share of the single-state "
        "spread (below 1: the arousal range is compressed in multi-platform time).",
    )
    birth_year_mean: float = Field(1975.0, description="Mean birth year (roster covariate).")
    birth_year_sd: float = Field(8.0, ge=0, description="SD of birth year (years).")

    @field_validator("name")
    @classmethod
    def _id(cls, v: str) -> str:
        if not ID_RE.fullmatch(v):
            raise ValueError("a cohort name is 1-64 characters from A-Z a-z 0-9 _ -")
        return v

    @field_validator("bout_distribution")
    @classmethod
    def _known_distribution(cls, v: str) -> str:
        from synthetic_diaries.codes import BOUT_DISTRIBUTIONS

        if v not in BOUT_DISTRIBUTIONS:
            raise ValueError(f"unknown bout distribution {v!r}; choose one of "
                             f"{', '.join(sorted(BOUT_DISTRIBUTIONS))}")
        return v

    @field_validator("single_platforms", "multi_anchors", "multi_companions")
    @classmethod
    def _weights(cls, v: dict[str, float], info) -> dict[str, float]:
        return _positive_weights(v, info.field_name)

    @model_validator(mode="after")
    def _stretch_probabilities(self) -> "CohortBehaviour":
        if self.multi_probability + self.none_probability > 1:
            raise ValueError("multi_probability + none_probability must be at most 1")
        anchors, companions = set(self.multi_anchors), set(self.multi_companions)
        if self.multi_probability > 0 and not all(companions - {a} for a in anchors):
            raise ValueError("every multi anchor needs a companion platform other than itself")
        return self

    def platforms(self) -> set[str]:
        """Every platform code this behaviour can put in view."""
        return set(self.single_platforms) | set(self.multi_anchors) | set(self.multi_companions)


def _default_cohorts() -> list[CohortBehaviour]:
    return [
        CohortBehaviour(
            name="early_adopters",
            multi_probability=0.5,
            bout_mean_s=21.0,
            compression_factor=0.6,
            birth_year_mean=1994.0,
            birth_year_sd=5.0,
            single_platforms={"tv": 0.45, "laptop": 0.2, "console": 0.12, "book": 0.1,
                              "magazine": 0.05, "newspaper": 0.08},
            multi_companions={"phone": 0.65, "tablet": 0.2, "magazine": 0.05,
                              "newspaper": 0.05, "book": 0.05},
        ),
        CohortBehaviour(
            name="late_adopters",
            multi_probability=0.4,
            bout_mean_s=34.0,
            compression_factor=0.85,
            birth_year_mean=1961.0,
            birth_year_sd=7.0,
            single_platforms={"tv": 0.55, "laptop": 0.05, "book": 0.13, "magazine": 0.12,
                              "newspaper": 0.15},
            multi_anchors={"tv": 0.9, "laptop": 0.1},
            multi_companions={"phone": 0.35, "tablet": 0.2, "magazine": 0.17,
                              "newspaper": 0.18, "book": 0.1},
        ),
    ]


class ArousalOptions(_Strict):
    """Tonic skin conductance on the video clock, per state."""

    scl_median_us: float = Field(
        7.0, gt=0,
        description="Median participant baseline skin conductance level (uS); typical SCL is "
        "2-20 uS (Dawson, Schell & Filion, Handbook of Psychophysiology).",
    )
    scl_sd_log: float = Field(0.3, ge=0, description="SD of log baseline SCL across participants.")
    scl_min_us: float = Field(
        3.0, gt=0, description="Participant baselines are clipped to at least this (uS)."
    )
    scl_max_us: float = Field(
        15.0, gt=0, description="Participant baselines are clipped to at most this (uS)."
    )
    session_offset_sd_us: float = Field(
        0.4, ge=0, description="SD of a session's shift of the baseline (uS), day to day."
    )
    none_level_us: float = Field(-0.3, description="Tonic level shift with nothing in view (uS).")
    single_level_us: float = Field(
        0.0, description="Tonic level shift in single-platform time (uS)."
    )
    multi_level_us: float = Field(0.5, description="Tonic level shift in multi-platform time (uS).")
    none_spread_us: float = Field(
        0.6, ge=0, description="SD of tonic fluctuation with nothing in view (uS)."
    )
    single_spread_us: float = Field(
        0.8, ge=0,
        description="SD of tonic fluctuation in single-platform time (uS); the multi state's "
        "is this times the cohort's compression_factor.",
    )
    fluctuation_time_constant_s: float = Field(
        30.0, gt=0,
        description="Time constant of the tonic fluctuation (s, each of its two low-pass stages).",
    )
    transition_time_constant_s: float = Field(
        20.0, gt=0,
        description="Time constant with which level and spread follow a state change (s)."
    )
    drift_sd_us: float = Field(0.3, ge=0, description="SD of the slow tonic drift (uS).")
    drift_time_constant_min: float = Field(
        15.0, gt=0, description="Time constant of the slow tonic drift (minutes)."
    )
    floor_us: float = Field(
        1.0, gt=0, description="The clean tonic level never falls below this (uS)."
    )

    @model_validator(mode="after")
    def _range(self) -> "ArousalOptions":
        if self.scl_min_us > self.scl_max_us:
            raise ValueError("scl_min_us must be at most scl_max_us")
        return self


class ScrOptions(_Strict):
    """Skin conductance responses (the phasic part)."""

    shape: str = Field(
        "bateman",
        description="SCR impulse response: 'bateman' (Benedek & Kaernbach 2010).",
    )
    tau_rise_s: float = Field(
        0.75, gt=0,
        description="Rise time constant tau1 of the Bateman function (s); near 0.7-1 s "
        "(Benedek & Kaernbach 2010; Greco et al. 2016).",
    )
    tau_decay_s: float = Field(
        3.75, gt=0,
        description="Decay time constant tau2 of the Bateman function (s); 3.75 s "
        "(Benedek & Kaernbach 2010).",
    )
    none_rate_per_min: float = Field(
        1.5, ge=0, description="Non-specific SCRs per minute with nothing in view; 1-3 at rest "
        "(Dawson, Schell & Filion).",
    )
    single_rate_per_min: float = Field(
        2.0, ge=0, description="Non-specific SCRs per minute in single-platform time."
    )
    multi_rate_per_min: float = Field(
        2.5, ge=0, description="Non-specific SCRs per minute in multi-platform time."
    )
    amplitude_min_us: float = Field(
        0.1, gt=0, description="Smallest SCR amplitude (uS); typical 0.1-1.0 uS (Dawson, "
        "Schell & Filion).",
    )
    amplitude_max_us: float = Field(
        1.0, gt=0, description="Largest SCR amplitude (uS); amplitudes are log-uniform between."
    )
    switch_response_probability: float = Field(
        0.3, ge=0, le=1, description="Probability that a switch elicits an SCR."
    )
    switch_latency_min_s: float = Field(
        1.0, ge=0, description="Shortest latency of a switch-elicited SCR (s); 1-3 s "
        "(Dawson, Schell & Filion).",
    )
    switch_latency_max_s: float = Field(
        3.0, ge=0, description="Longest latency of a switch-elicited SCR (s)."
    )

    @field_validator("shape")
    @classmethod
    def _known_shape(cls, v: str) -> str:
        from synthetic_diaries.signals import SCR_SHAPES

        if v not in SCR_SHAPES:
            raise ValueError(f"unknown SCR shape {v!r}; choose one of "
                             f"{', '.join(sorted(SCR_SHAPES))}")
        return v

    @model_validator(mode="after")
    def _order(self) -> "ScrOptions":
        if self.tau_rise_s >= self.tau_decay_s:
            raise ValueError("tau_rise_s must be smaller than tau_decay_s")
        if self.amplitude_min_us > self.amplitude_max_us:
            raise ValueError("amplitude_min_us must be at most amplitude_max_us")
        if self.switch_latency_min_s > self.switch_latency_max_s:
            raise ValueError("switch_latency_min_s must be at most switch_latency_max_s")
        return self


class ArtifactOptions(_Strict):
    """Recording artifacts on the sensor clock; every rate zero gives a clean recording."""

    dropout_rate_per_hour: float = Field(
        1.0, ge=0, description="Dropouts (all channels NaN) per hour."
    )
    dropout_median_s: float = Field(8.0, gt=0, description="Median dropout length (s).")
    spike_rate_per_hour: float = Field(2.0, ge=0, description="EDA spikes (1-3 samples) per hour.")
    spike_min_us: float = Field(2.0, gt=0, description="Smallest spike height (uS).")
    spike_max_us: float = Field(10.0, gt=0, description="Largest spike height (uS).")
    motion_rate_per_hour: float = Field(
        3.0, ge=0, description="Motion bursts (accelerometer and EDA disturbed) per hour."
    )
    motion_median_s: float = Field(5.0, gt=0, description="Median motion burst length (s).")
    motion_acc_sd_g: float = Field(0.5, ge=0, description="Accelerometer SD added in a burst (g).")
    motion_eda_sd_us: float = Field(0.4, ge=0, description="EDA disturbance SD in a burst (uS).")
    flatline_rate_per_hour: float = Field(
        0.3, ge=0, description="Electrode-off stretches (EDA flat at flatline_level_us) per hour."
    )
    flatline_median_s: float = Field(45.0, gt=0, description="Median electrode-off length (s).")
    flatline_level_us: float = Field(
        0.0, ge=0, description="EDA reading while an electrode is off (uS)."
    )
    clipping_rate_per_hour: float = Field(
        0.2, ge=0, description="Stretches where EDA reads the sensor's range end, per hour."
    )
    clipping_median_s: float = Field(20.0, gt=0, description="Median clipping length (s).")
    clip_level_us: float = Field(
        60.0, gt=0, description="Upper end of the simulated sensor's range (uS)."
    )
    length_sd_log: float = Field(
        0.5, ge=0, description="SD of log artifact length (lognormal around each median)."
    )

    def rates(self) -> dict[str, float]:
        return {
            "dropout": self.dropout_rate_per_hour,
            "spike": self.spike_rate_per_hour,
            "motion": self.motion_rate_per_hour,
            "flatline": self.flatline_rate_per_hour,
            "clipping": self.clipping_rate_per_hour,
        }

    def without(self) -> "ArtifactOptions":
        """The same options with every artifact rate zero (a clean recording)."""
        return self.model_copy(update={f"{k}_rate_per_hour": 0.0 for k in self.rates()})


class UncodedOptions(_Strict):
    """Stretches the coders could not code (missing rows in media_log.csv)."""

    rate_per_hour: float = Field(1.0, ge=0, description="Uncoded stretches per hour of session.")
    min_s: int = Field(
        10, ge=4,
        description="Shortest uncoded stretch (s); longer than max_gap_s, so whether an "
        "uncoded gap breaks a switch never depends on how its seconds are read.",
    )
    mean_s: float = Field(45.0, gt=0, description="Mean uncoded stretch length (s).")

    @model_validator(mode="after")
    def _mean(self) -> "UncodedOptions":
        if self.mean_s < self.min_s:
            raise ValueError("mean_s must be at least min_s")
        return self


class ClockOptions(_Strict):
    """The sensor's clock: sensor_s = offset_s + (1 + drift_ppm * 1e-6) * video_s."""

    offset_s: float = Field(
        90.0, description="Mean sensor-clock time at the video's second 0 (s): the sensor "
        "starts recording this long before the camera."
    )
    offset_spread_s: float = Field(
        60.0, ge=0, description="Offsets are uniform within offset_s +/- this (s)."
    )
    drift_ppm: float = Field(
        40.0, description="Mean sensor clock drift (parts per million); consumer quartz "
        "clocks drift tens of ppm (common practice)."
    )
    drift_spread_ppm: float = Field(
        20.0, ge=0, description="Drifts are uniform within drift_ppm +/- this (ppm)."
    )
    tail_s: float = Field(
        60.0, ge=0, description="The sensor keeps recording this long after the video ends (s)."
    )
    min_sync_pairs: int = Field(2, ge=0, description="Fewest sync events per session.")
    max_sync_pairs: int = Field(3, ge=0, description="Most sync events per session.")
    sync_jitter_s: float = Field(
        0.02, ge=0, description="SD of the timing error of a sync event (s); about half a video "
        "frame at 25 fps.",
    )
    video_fps: float = Field(25.0, gt=0, description="Video frame rate: video_s is a frame time.")

    @model_validator(mode="after")
    def _pairs(self) -> "ClockOptions":
        if self.min_sync_pairs > self.max_sync_pairs:
            raise ValueError("min_sync_pairs must be at most max_sync_pairs")
        return self


class CodingOptions(_Strict):
    """The coders: coder_a codes every session; coder_b double-codes a share."""

    primary_coder: str = Field("coder_a", description="Coder of every session (ID rule).")
    second_coder: str = Field("coder_b", description="Coder of the double-coded sessions.")
    double_coded_share: float = Field(
        0.25, ge=0, le=1, description="Share of sessions coded by the second coder too."
    )
    boundary_jitter_s: int = Field(
        1, ge=0, description="The second coder moves each bout boundary by up to this (s)."
    )
    disagreement_share: float = Field(
        0.02, ge=0, le=1,
        description="Share of seconds where the second coder attends a random in-view "
        "platform (or none).",
    )

    @model_validator(mode="after")
    def _coders(self) -> "CodingOptions":
        for c in (self.primary_coder, self.second_coder):
            if not ID_RE.fullmatch(c):
                raise ValueError(f"coder name {c!r} must follow the ID rule")
        if self.primary_coder == self.second_coder:
            raise ValueError("the two coders need different names")
        return self


class SensorOptions(_Strict):
    """Measurement noise and resolution of the simulated wearable."""

    eda_noise_sd_us: float = Field(0.003, ge=0, description="White noise SD on EDA (uS).")
    eda_resolution_us: float = Field(
        2.0**-10, gt=0, description="EDA quantisation step (uS); about 0.001 uS."
    )
    acc_noise_sd_g: float = Field(
        0.01, ge=0, description="White noise SD on each accelerometer axis (g)."
    )
    acc_resolution_g: float = Field(
        1.0 / 64, gt=0, description="Accelerometer quantisation step (g); 8-bit at +/-2 g "
        "(common practice)."
    )
    tilt_sd_rad: float = Field(0.15, ge=0, description="SD of the slow wrist tilt (rad).")
    tilt_time_constant_s: float = Field(
        120.0, gt=0, description="Time constant of the wrist tilt (s)."
    )


class HeartOptions(_Strict):
    """Heart rate, one sample per second in the recording (NaN between)."""

    enabled: bool = Field(True, description="Write an hr_bpm channel.")
    rate_hz: float = Field(1.0, gt=0, description="Heart-rate samples per second.")
    baseline_mean_bpm: float = Field(
        72.0, gt=30, description="Mean participant resting heart rate."
    )
    baseline_sd_bpm: float = Field(
        8.0, ge=0, description="SD of resting heart rate across participants."
    )
    multi_shift_bpm: float = Field(
        2.0, description="Heart-rate shift in multi-platform time (bpm)."
    )
    fluctuation_sd_bpm: float = Field(3.0, ge=0, description="SD of heart-rate fluctuation (bpm).")
    fluctuation_time_constant_s: float = Field(
        20.0, gt=0, description="Time constant of that fluctuation (s)."
    )


class SynthOptions(_Strict):
    """Everything that defines a synthetic study; the study is a function of these."""

    seed: int = Field(
        20241014, ge=0, description="Random seed: the same options give the same bytes."
    )
    study_name: str = Field(
        "Synthetic evening media study", description="Study title for study.toml."
    )
    timezone: str = Field(
        "Europe/Lisbon", description="IANA zone of the evenings; times carry its offset."
    )
    first_evening: dt.date = Field(dt.date(2024, 10, 14), description="First possible evening.")
    study_days: int = Field(21, ge=1, description="Evenings are drawn from this many days.")
    evening_start_earliest_h: float = Field(
        18.5, ge=0, lt=24, description="Earliest session start (local hour)."
    )
    evening_start_latest_h: float = Field(
        21.0, ge=0, lt=24, description="Latest session start (local hour)."
    )
    participants_per_cohort: int = Field(6, ge=1, description="Participants in each cohort.")
    cohorts: list[CohortBehaviour] = Field(
        default_factory=_default_cohorts, description="The cohorts and their behaviour."
    )
    sessions_per_participant: int = Field(
        3, ge=1, description="Sessions (evenings) per participant."
    )
    session_hours: float = Field(2.0, gt=0, description="Mean session length (hours).")
    session_hours_spread: float = Field(
        0.1, ge=0, lt=1,
        description="Session lengths are uniform within +/- this share of session_hours."
    )
    sampling_rate_hz: float = Field(32.0, gt=0, description="Sensor sampling rate (Hz).")
    participant_switch_sd_log: float = Field(
        0.25, ge=0,
        description="SD of the log of each participant's switch-rate multiplier (lognormal, "
        "median 1): the participant random effect.",
    )
    household_share_probability: float = Field(
        0.3, ge=0, le=1,
        description="Probability that a participant shares the previous one's household."
    )
    platform_groups: dict[str, str] = Field(
        default_factory=lambda: dict(DEFAULT_PLATFORM_GROUPS),
        description="Platform vocabulary: code -> group, written to [platforms.groups].",
    )
    platform_labels: dict[str, str] = Field(
        default_factory=lambda: dict(DEFAULT_PLATFORM_LABELS),
        description="Readable label per platform code, written to [platforms.labels].",
    )
    survey: bool = Field(True, description="Write survey.csv (Likert items 1-7).")
    truth_simulation_hours: float = Field(
        100.0, gt=0,
        description="Hours of media codes simulated per cohort (typical participant, fixed "
        "seed) to compute the long-run switch rate and the true rate ratio of truth/.",
    )
    arousal: ArousalOptions = Field(default_factory=ArousalOptions, description="Tonic arousal.")
    scr: ScrOptions = Field(default_factory=ScrOptions, description="Skin conductance responses.")
    artifacts: ArtifactOptions = Field(default_factory=ArtifactOptions, description="Artifacts.")
    uncoded: UncodedOptions = Field(
        default_factory=UncodedOptions, description="Uncoded stretches."
    )
    clock: ClockOptions = Field(default_factory=ClockOptions, description="Sensor clock and sync.")
    coding: CodingOptions = Field(default_factory=CodingOptions, description="Coders.")
    sensor: SensorOptions = Field(default_factory=SensorOptions, description="Sensor noise.")
    heart: HeartOptions = Field(default_factory=HeartOptions, description="Heart rate.")

    @field_validator("timezone")
    @classmethod
    def _zone(cls, v: str) -> str:
        return check_time_zone(v)

    @model_validator(mode="after")
    def _consistent(self) -> "SynthOptions":
        names = [c.name for c in self.cohorts]
        if not names:
            raise ValueError("at least one cohort is needed")
        if len(set(names)) != len(names):
            raise ValueError("cohort names must be unique")
        for c in self.cohorts:
            unknown = sorted(c.platforms() - set(self.platform_groups))
            if unknown:
                raise ValueError(f"cohort {c.name!r} uses platforms not in platform_groups: "
                                 f"{', '.join(unknown)}")
        bad = [p for p in self.platform_groups if not re.fullmatch(r"[A-Za-z0-9_-]+", p)]
        if bad:
            raise ValueError(f"platform codes must be plain [A-Za-z0-9_-]: {bad}")
        if self.sessions_per_participant > self.study_days:
            raise ValueError("sessions_per_participant cannot exceed study_days (one per evening)")
        if self.evening_start_earliest_h > self.evening_start_latest_h:
            raise ValueError("evening_start_earliest_h must be at most evening_start_latest_h")
        return self

    def cohort(self, name: str) -> CohortBehaviour:
        for c in self.cohorts:
            if c.name == name:
                return c
        raise KeyError(name)


# --------------------------------------------------------------------------- loading
def options_from_dict(data: dict[str, Any], source: str = "synth options") -> SynthOptions:
    """Validate a dict (e.g. read from TOML) into :class:`SynthOptions`.

    Raises :class:`~pipeline.errors.ConfigError` naming each bad key, with a
    "did you mean" suggestion for a misspelt one.
    """
    try:
        return SynthOptions.model_validate(data)
    except ValidationError as err:
        raise explain_validation(err, SynthOptions, source, noun="option") from None


def load_options(path: Path) -> SynthOptions:
    """Read :class:`SynthOptions` from a TOML file (keys as the field names)."""
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{path}: not valid TOML ({err})") from None
    except OSError as err:
        raise ConfigError(f"{path}: cannot be read ({err.strerror})") from None
    return options_from_dict(data, str(path))
