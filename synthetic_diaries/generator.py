"""Write a complete synthetic study in the study data contract's format, with its truth.

``generate_study(out_dir, opts)`` writes, into ``out_dir``::

    study.toml  roster.csv  sessions.csv  media_log.csv  sync.csv  survey.csv
    signals/{participant_id}__{session_id}.parquet
    truth/      (never read by the pipeline)
      sessions.csv      per session: coded/media/multi seconds, switches, the true
                        compression ratio, the sensor clock's offset and drift ...
      participants.csv  per participant: switch-rate multiplier, baseline SCL, HR
      scrs.csv          every generated SCR (both clocks, amplitude, cause)
      artifacts.csv     every injected artifact (both clocks)
      seconds.parquet   per video second: true state, coded, valid, clean 1 Hz SC (arousal
                        = (eda_clean_us - arousal_mean_us) / arousal_sd_us of participants.csv)
      parameters.json   every option and the true per-cohort parameters

Each piece of randomness has its own stream, seeded from ``opts.seed`` and the
position of what it makes (participant, session, purpose), so the same options give
the same bytes, and turning artifacts off leaves codes and clean signals unchanged.
"""

from __future__ import annotations

import datetime as dt
import json
from dataclasses import dataclass
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from synthetic_diaries.codes import (
    MULTI,
    NONE,
    SINGLE,
    STATE_NAMES,
    SessionCodes,
    _simulate,
    count_switches,
    design_switch_rate_per_multi_hour,
    draw_uncoded,
    expected_bout_s,
    second_coder,
    simulate_session_codes,
    uncoded_mask,
)
from synthetic_diaries.options import CohortBehaviour, SynthOptions, load_options, options_from_dict
from synthetic_diaries.signals import simulate_recording

__all__ = ["SynthOptions", "CohortBehaviour", "generate_study", "simulate_session_codes",
           "load_options", "options_from_dict", "study_toml_text", "STUDY_FILES"]

#: The contract's rules the truth is computed with (CONTRACT §2 defaults).
MAX_GAP_S = 3
MIN_BOUT_S = 1
MIN_MULTI_MINUTES = 5.0
MIN_STATE_MINUTES = 10.0

#: Survey items (Likert 1-7) and how each leans on the participant's switching.
SURVEY_ITEMS: dict[str, float] = {
    "multitasking_habit": 1.0,
    "focus_difficulty": 0.6,
    "evening_tv_enjoyment": 0.0,
    "print_reading_habit": -0.5,
}
LIKERT_MIN, LIKERT_MAX = 1, 7

#: What generate_study writes (``screenweave synth --force`` replaces exactly these).
STUDY_FILES = ("study.toml", "roster.csv", "sessions.csv", "media_log.csv", "sync.csv",
               "survey.csv", "signals", "truth")

# purposes of the random streams
_PARTICIPANT, _SCHEDULE, _CODES, _UNCODED, _CLOCK, _SIGNAL, _CODER_B = range(1, 8)
_DOUBLE, _HOUSEHOLD, _SURVEY, _EXPECTED = 11, 12, 13, 14


def _rng(opts: SynthOptions, *where: int) -> np.random.Generator:
    return np.random.default_rng([opts.seed, *where])


# ---------------------------------------------------------------- participants
@dataclass
class Participant:
    index: int
    participant_id: str
    cohort: CohortBehaviour
    birth_year: int
    household_id: str
    switch_rate_multiplier: float
    scl_baseline_us: float
    hr_baseline_bpm: float


def _participants(opts: SynthOptions) -> list[Participant]:
    total = opts.participants_per_cohort * len(opts.cohorts)
    width = max(2, len(str(total)))
    house_rng = _rng(opts, _HOUSEHOLD)
    out: list[Participant] = []
    household = 0
    for c_i, cohort in enumerate(opts.cohorts):
        shared_prev = False
        for j in range(opts.participants_per_cohort):
            i = c_i * opts.participants_per_cohort + j
            rng = _rng(opts, _PARTICIPANT, i)
            multiplier = float(np.exp(rng.normal(0.0, opts.participant_switch_sd_log)))
            a = opts.arousal
            scl = float(np.clip(a.scl_median_us * np.exp(rng.normal(0.0, a.scl_sd_log)),
                                a.scl_min_us, a.scl_max_us))
            hr = float(rng.normal(opts.heart.baseline_mean_bpm, opts.heart.baseline_sd_bpm))
            birth = int(np.rint(rng.normal(cohort.birth_year_mean, cohort.birth_year_sd)))
            joins = (j > 0 and not shared_prev
                     and house_rng.random() < opts.household_share_probability)
            if not joins:
                household += 1
            shared_prev = joins
            out.append(Participant(
                index=i, participant_id=f"p{i + 1:0{width}d}", cohort=cohort,
                birth_year=birth, household_id=f"h{household:0{width}d}",
                switch_rate_multiplier=multiplier, scl_baseline_us=scl,
                hr_baseline_bpm=float(np.clip(hr, 45.0, 110.0)),
            ))
    return out


def _schedule(opts: SynthOptions, p: Participant) -> list[dict]:
    """Evenings of one participant: distinct days, local start times with their offset."""
    rng = _rng(opts, _SCHEDULE, p.index)
    zone = ZoneInfo(opts.timezone)
    days = np.sort(rng.choice(opts.study_days, opts.sessions_per_participant, replace=False))
    width = len(str(opts.sessions_per_participant))
    rows = []
    for k, day in enumerate(days):
        date = opts.first_evening + dt.timedelta(days=int(day))
        start_s = int(np.rint(3600 * rng.uniform(opts.evening_start_earliest_h,
                                                 opts.evening_start_latest_h)))
        spread = opts.session_hours_spread
        duration = int(np.rint(opts.session_hours * 3600 * rng.uniform(1 - spread, 1 + spread)))
        duration = max(duration, 60)
        wall = dt.datetime.combine(date, dt.time()) + dt.timedelta(seconds=start_s)
        start = wall.replace(tzinfo=zone)
        start_utc = start.astimezone(dt.timezone.utc)
        end = (start_utc + dt.timedelta(seconds=duration)).astimezone(zone)
        rows.append({"session_id": f"e{k + 1:0{width}d}", "start": start.isoformat(),
                     "end": end.isoformat(), "duration_s": duration})
    return rows


# ------------------------------------------------------------------ one session
def _sync_pairs(rng: np.random.Generator, opts: SynthOptions, duration: int, offset: float,
                rate: float) -> np.ndarray:
    c = opts.clock
    n = int(rng.integers(c.min_sync_pairs, c.max_sync_pairs + 1))
    if n == 0:
        return np.zeros((0, 2))
    where = np.linspace(0.03, 0.97, n) if n > 1 else np.array([0.03])
    where = np.clip(where + rng.uniform(-0.02, 0.02, n), 0.0, 1.0)
    video = np.rint(where * duration * c.video_fps) / c.video_fps
    true_sensor = offset + rate * video + rng.normal(0.0, c.sync_jitter_s, n)
    sensor = np.rint(true_sensor * opts.sampling_rate_hz) / opts.sampling_rate_hz
    return np.column_stack([video, sensor])


def _write_parquet(frame: pd.DataFrame, path: Path) -> None:
    table = pa.Table.from_pandas(frame, preserve_index=False)
    floats = [n for n, t in zip(table.schema.names, table.schema.types)
              if pa.types.is_floating(t)]
    pq.write_table(table, path, compression="zstd", compression_level=9,
                   use_byte_stream_split=floats, use_dictionary=False,
                   write_statistics=True)


def _z_ranges(values: np.ndarray, use: np.ndarray, state: np.ndarray, coded: np.ndarray,
              mean: float, sd: float) -> dict[str, float]:
    out: dict[str, float] = {}
    for code, name in ((SINGLE, "single"), (MULTI, "multi")):
        sel = use & coded & (state == code)
        out[f"{name}_valid_seconds"] = int(sel.sum())
        if sel.sum() >= MIN_STATE_MINUTES * 60 and sd > 0:
            z = (values[sel] - mean) / sd
            p5, p95 = np.percentile(z, [5, 95])
            out[f"arousal_range_{name}"] = float(p95 - p5)
        else:
            out[f"arousal_range_{name}"] = float("nan")
    out["compression_ratio_true"] = out["arousal_range_multi"] / out["arousal_range_single"]
    return out


# ----------------------------------------------------------------------- study
def study_toml_text(opts: SynthOptions, data_dir: str | None = None) -> str:
    """The study's settings as TOML (study.toml; with ``data_dir`` for a run config)."""
    q = lambda s: json.dumps(s, ensure_ascii=False)  # JSON strings are TOML basic strings
    lines = ["# Invented study made by `screenweave synth` (synthetic_diaries): no real",
             "# people, households, brands or studies are in it.", "", "[study]"]
    if data_dir is not None:
        lines.append(f"data_dir = {q(data_dir)}")
    lines += [f"name = {q(opts.study_name)}", f"timezone = {q(opts.timezone)}", "",
              "[platforms.groups]"]
    lines += [f"{k} = {q(v)}" for k, v in opts.platform_groups.items()]
    labels = {k: v for k, v in opts.platform_labels.items() if k in opts.platform_groups}
    if labels:
        lines += ["", "[platforms.labels]"] + [f"{k} = {q(v)}" for k, v in labels.items()]
    lines += ["", "[coding]", f"primary_coder = {q(opts.coding.primary_coder)}"]
    if opts.survey:
        items = ", ".join(q(i) for i in SURVEY_ITEMS)
        lines += ["", "[survey]", f"items = [{items}]", f"scale_min = {LIKERT_MIN}",
                  f"scale_max = {LIKERT_MAX}"]
    return "\n".join(lines) + "\n"


def generate_study(out_dir: Path, opts: SynthOptions) -> Path:
    """Generate a synthetic study with known truth into ``out_dir``.

    Parameters
    ----------
    out_dir : Path
        Folder to write (created if missing). Files of the study are overwritten;
        other files in it are left alone.
    opts : SynthOptions
        Everything that defines the study, ``seed`` included.

    Returns
    -------
    Path
        ``out_dir``.
    """
    out_dir = Path(out_dir)
    (out_dir / "signals").mkdir(parents=True, exist_ok=True)
    (out_dir / "truth").mkdir(parents=True, exist_ok=True)
    platforms = sorted(opts.platform_groups)
    participants = _participants(opts)
    schedules = {p.participant_id: _schedule(opts, p) for p in participants}
    n_sessions = sum(len(s) for s in schedules.values())
    n_double = int(round(opts.coding.double_coded_share * n_sessions))
    double = set(_rng(opts, _DOUBLE).choice(n_sessions, n_double, replace=False).tolist())

    media, sync, truth_rows, scrs, artifacts, seconds = [], [], [], [], [], []
    zstats: dict[str, tuple[float, float]] = {}
    session_no = 0
    for p in participants:
        per_session = []
        for k, sched in enumerate(schedules[p.participant_id]):
            sid, duration = sched["session_id"], sched["duration_s"]
            where = (p.index, k)
            codes: SessionCodes = _simulate(_rng(opts, _CODES, *where), p.cohort, duration,
                                            p.switch_rate_multiplier, platforms)
            u0, u1 = draw_uncoded(_rng(opts, _UNCODED, *where), duration, opts.uncoded)
            coded = ~uncoded_mask(duration, u0, u1)
            switches, _ = count_switches(codes.bout_start, codes.bout_end, codes.bout_platform,
                                         u0, u1, max_gap_s=MAX_GAP_S, min_bout_s=MIN_BOUT_S)
            # what really happened, coded or not, drives the switch-elicited SCRs
            _, all_switch_s = count_switches(codes.bout_start, codes.bout_end,
                                             codes.bout_platform, u0[:0], u1[:0],
                                             max_gap_s=MAX_GAP_S, min_bout_s=MIN_BOUT_S)

            crng = _rng(opts, _CLOCK, *where)
            c = opts.clock
            offset = float(c.offset_s + crng.uniform(-c.offset_spread_s, c.offset_spread_s))
            drift = float(c.drift_ppm + crng.uniform(-c.drift_spread_ppm, c.drift_spread_ppm))
            rate = 1.0 + drift * 1e-6
            pairs = _sync_pairs(crng, opts, duration, offset, rate)

            rec = simulate_recording(_rng(opts, _SIGNAL, *where), codes.state, all_switch_s,
                                     scl_baseline_us=p.scl_baseline_us,
                                     hr_baseline_bpm=p.hr_baseline_bpm, cohort=p.cohort,
                                     offset_s=offset, rate=rate, opts=opts)
            _write_parquet(rec.samples, out_dir / "signals" / f"{p.participant_id}__{sid}.parquet")

            frame = codes.frame()
            coders = [(opts.coding.primary_coder, frame)]
            if session_no in double:
                att_b = second_coder(_rng(opts, _CODER_B, *where), codes, opts.coding)
                coders.append((opts.coding.second_coder, codes.frame(att_b)))
            for coder, f in coders:
                f = f[coded].copy()
                f.insert(0, "session_id", sid)
                f.insert(0, "participant_id", p.participant_id)
                f["coder"] = coder
                media.append(f)
            sync.append(pd.DataFrame({"participant_id": p.participant_id, "session_id": sid,
                                      "video_s": pairs[:, 0], "sensor_s": pairs[:, 1]}))
            for table, target in ((rec.scrs, scrs), (rec.artifacts, artifacts)):
                t = table.copy()
                t.insert(0, "session_id", sid)
                t.insert(0, "participant_id", p.participant_id)
                target.append(t)

            state = codes.state
            multi_s = int((coded & (state == MULTI)).sum())
            in_session = (rec.scrs["state"] != "outside").sum()
            truth_rows.append({
                "participant_id": p.participant_id, "session_id": sid,
                "cohort": p.cohort.name, "duration_s": duration,
                "coded_seconds": int(coded.sum()),
                "uncoded_seconds": int((~coded).sum()),
                "uncoded_stretches": len(u0),
                "media_seconds": int((coded & (state != NONE)).sum()),
                "single_seconds": int((coded & (state == SINGLE)).sum()),
                "multi_seconds": multi_s,
                "switches": switches,
                "switches_per_hour": (switches / (multi_s / 3600.0)
                                      if multi_s >= MIN_MULTI_MINUTES * 60 else float("nan")),
                "valid_seconds": int((coded & rec.valid).sum()),
                "offset_s": offset, "drift_ppm": drift, "clock_rate": rate,
                "sync_pairs": len(pairs),
                "double_coded": session_no in double,
                "switch_rate_multiplier": p.switch_rate_multiplier,
                "scrs": int(in_session),
                "scr_per_min": float(in_session / (duration / 60.0)),
                "artifacts": len(rec.artifacts),
            })
            per_session.append((len(truth_rows) - 1, rec, coded, state, sid, duration))
            session_no += 1

        # arousal truth: within-participant z over every valid second, all sessions
        vals = np.concatenate([r.clean_1hz_us for _, r, *_ in per_session])
        use = np.concatenate([r.valid & np.isfinite(r.clean_1hz_us) for _, r, *_ in per_session])
        mean = float(vals[use].mean()) if use.any() else float("nan")
        sd = float(vals[use].std()) if use.any() else float("nan")
        for row_i, rec, coded, state, sid, duration in per_session:
            use_s = rec.valid & np.isfinite(rec.clean_1hz_us)
            truth_rows[row_i].update(_z_ranges(rec.clean_1hz_us, use_s, state, coded, mean, sd))
            seconds.append(pd.DataFrame({
                "participant_id": p.participant_id, "session_id": sid,
                "second": np.arange(duration, dtype=np.int64),
                "state": np.array(STATE_NAMES, dtype=object)[state],
                "coded": coded, "signal_valid": use_s,
                "eda_clean_us": rec.clean_1hz_us,
            }))
        zstats[p.participant_id] = (mean, sd)

    # ------------------------------------------------------------------ write
    roster = pd.DataFrame([{"participant_id": p.participant_id, "cohort": p.cohort.name,
                            "birth_year": p.birth_year, "household_id": p.household_id}
                           for p in participants])
    roster.to_csv(out_dir / "roster.csv", index=False)
    sessions = pd.DataFrame([{"participant_id": p.participant_id, "session_id": s["session_id"],
                              "start": s["start"], "end": s["end"]}
                             for p in participants for s in schedules[p.participant_id]])
    sessions.to_csv(out_dir / "sessions.csv", index=False)
    log = pd.concat(media, ignore_index=True)
    log.to_csv(out_dir / "media_log.csv", index=False)
    pd.concat(sync, ignore_index=True).to_csv(out_dir / "sync.csv", index=False)
    if opts.survey:
        _survey(opts, participants).to_csv(out_dir / "survey.csv", index=False)
    elif (out_dir / "survey.csv").exists():
        (out_dir / "survey.csv").unlink()
    (out_dir / "study.toml").write_text(study_toml_text(opts), encoding="utf-8")

    truth = pd.DataFrame(truth_rows)
    truth.to_csv(out_dir / "truth" / "sessions.csv", index=False)
    pd.DataFrame([{
        "participant_id": p.participant_id, "cohort": p.cohort.name,
        "switch_rate_multiplier": p.switch_rate_multiplier,
        "switch_rate_design_per_multi_hour": design_switch_rate_per_multi_hour(
            p.cohort, MAX_GAP_S, p.switch_rate_multiplier),
        "scl_baseline_us": p.scl_baseline_us, "hr_baseline_bpm": p.hr_baseline_bpm,
        "arousal_mean_us": zstats[p.participant_id][0],
        "arousal_sd_us": zstats[p.participant_id][1],
    } for p in participants]).to_csv(out_dir / "truth" / "participants.csv", index=False)
    pd.concat(scrs, ignore_index=True).to_csv(out_dir / "truth" / "scrs.csv", index=False)
    pd.concat(artifacts, ignore_index=True).to_csv(out_dir / "truth" / "artifacts.csv",
                                                   index=False)
    _write_parquet(pd.concat(seconds, ignore_index=True), out_dir / "truth" / "seconds.parquet")
    parameters = _parameters(opts, participants, truth)
    (out_dir / "truth" / "parameters.json").write_text(
        json.dumps(parameters, indent=2, sort_keys=False, allow_nan=False) + "\n",
        encoding="utf-8")
    return out_dir


def _survey(opts: SynthOptions, participants: list[Participant]) -> pd.DataFrame:
    rng = _rng(opts, _SURVEY)
    lean = np.log([design_switch_rate_per_multi_hour(p.cohort, MAX_GAP_S,
                                                     p.switch_rate_multiplier)
                   for p in participants])
    z = (lean - lean.mean()) / lean.std() if lean.std() > 0 else np.zeros(len(lean))
    rows = []
    for item, loading in SURVEY_ITEMS.items():
        raw = 4.0 + 1.2 * loading * z + rng.normal(0.0, 1.0, len(participants))
        values = np.clip(np.rint(raw), LIKERT_MIN, LIKERT_MAX).astype(int)
        rows += [{"participant_id": p.participant_id, "item": item, "value": int(v)}
                 for p, v in zip(participants, values)]
    return pd.DataFrame(rows)


def expected_switch_rate(opts: SynthOptions, cohort: CohortBehaviour) -> float:
    """Long-run switches per multi-platform hour of a cohort's typical participant.

    Monte Carlo over ``opts.truth_simulation_hours`` of simulated sessions (multiplier
    1, every second coded, a stream seeded by the seed and the cohort's position):
    total switches by the contract's rules over total multi-platform hours. Unlike
    :func:`~synthetic_diaries.codes.design_switch_rate_per_multi_hour` it includes
    switches at the edges of stretches, as every count of real codes does.
    """
    platforms = sorted(opts.platform_groups)
    position = [c.name for c in opts.cohorts].index(cohort.name)
    rng = _rng(opts, _EXPECTED, position)
    session_s = max(int(round(opts.session_hours * 3600)), 4 * 3600)  # few, long chunks
    n = max(1, int(np.ceil(opts.truth_simulation_hours * 3600 / session_s)))
    switches = multi = 0
    empty = np.array([], dtype=np.int64)
    for _ in range(n):
        codes = _simulate(rng, cohort, session_s, 1.0, platforms)
        count, _ = count_switches(codes.bout_start, codes.bout_end, codes.bout_platform,
                                  empty, empty, max_gap_s=MAX_GAP_S, min_bout_s=MIN_BOUT_S)
        switches += count
        multi += int((codes.state == MULTI).sum())
    return switches / (multi / 3600.0) if multi else float("nan")


def _nan_to_none(x: float) -> float | None:
    return None if x is None or not np.isfinite(x) else float(x)


def _parameters(opts: SynthOptions, participants: list[Participant],
                truth: pd.DataFrame) -> dict:
    reference = sorted(c.name for c in opts.cohorts)[0]
    cohorts: dict[str, dict] = {}
    for c in opts.cohorts:
        rows = truth[truth["cohort"] == c.name]
        multi_h = rows["multi_seconds"].sum() / 3600.0
        ratios = rows["compression_ratio_true"].to_numpy(dtype=float)
        cohorts[c.name] = {
            "participants": int(sum(p.cohort.name == c.name for p in participants)),
            "sessions": int(len(rows)),
            "expected_bout_s": expected_bout_s(c),
            "switch_rate_design_per_multi_hour": design_switch_rate_per_multi_hour(c, MAX_GAP_S),
            "switch_rate_expected_per_multi_hour": _nan_to_none(expected_switch_rate(opts, c)),
            "switch_rate_generated_per_multi_hour": _nan_to_none(
                rows["switches"].sum() / multi_h if multi_h > 0 else float("nan")),
            "compression_factor": c.compression_factor,
            "compression_ratio_true_mean": _nan_to_none(
                float(np.nanmean(ratios)) if np.isfinite(ratios).any() else float("nan")),
        }
    ref = cohorts[reference]
    for c in cohorts.values():
        for kind in ("design", "expected", "generated"):
            mine = c[f"switch_rate_{kind}_per_multi_hour"]
            theirs = ref[f"switch_rate_{kind}_per_multi_hour"]
            c[f"rate_ratio_{kind}_vs_reference"] = (mine / theirs if mine is not None and theirs
                                                    else None)
    return {
        "generator": "synthetic_diaries.generator.generate_study",
        "options": opts.model_dump(mode="json"),
        "rules": {
            "max_gap_s": MAX_GAP_S, "min_bout_s": MIN_BOUT_S,
            "min_multi_minutes": MIN_MULTI_MINUTES, "min_state_minutes": MIN_STATE_MINUTES,
            "percentiles": [5, 95], "percentile_method": "numpy linear",
            "valid_second": "sensor recorded in it and no injected artifact touches it",
            "switch_across_uncoded": "an uncoded second between two bouts breaks the switch",
        },
        "reference_cohort": reference,
        "true_rate_ratio": {name: c["rate_ratio_expected_vs_reference"]
                            for name, c in cohorts.items()},
        "true_rate_ratio_note": "ratio of the long-run switches per multi-platform hour of a "
                                "typical participant (random effect 0, multiplier 1), by Monte "
                                "Carlo over truth_simulation_hours per cohort: what a log-link "
                                "mixed model's cohort term estimates. 'design' rates count only "
                                "switches inside multi-platform stretches (analytic); "
                                "'generated' rates pool this study's sessions.",
        "cohorts": cohorts,
    }
