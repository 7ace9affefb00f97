"""The runner: reads the study, runs the stages, writes the run's files.

Stages themselves compute and never touch files; this module is the only one that
does I/O for `screenweave run`. The order is:

1. ingest: validate the whole study (refuse early, with every problem listed);
2. per session (parallel): read recording -> signals -> align, cached on a hash of
   the session's inputs and the ``[signals]`` settings;
3. per participant: the mean and SD for the within-participant arousal z-score;
4. per session (parallel): arousal, media metrics, switch-locked arousal;
5. group: QC, models, survey, then the tables, manifest, charts, report and deck.
"""

from __future__ import annotations

import hashlib
import pickle
import platform
import sys
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from pipeline import __version__
from pipeline.agreement.session import SessionAgreement, session_agreement
from pipeline.align.clock import ClockMap
from pipeline.align.timeline import build_timeline
from pipeline.config import Config, resolve_study
from pipeline.errors import ScreenweaveError, StageError
from pipeline.execution import Outcome, TaskPool, keep_freed_memory, return_freed_memory
from pipeline.ingest import load_study
from pipeline.ingest import read_recording_checked
from pipeline.metrics.arousal import add_arousal, arousal_source
from pipeline.metrics.session import session_metrics
from pipeline.metrics.switch_locked import (session_seed, switch_locked_methods,
                                            switch_locked_session, switch_locked_summary)
from pipeline.models import ModelResults, compare, compare_survey, survey_methods
from pipeline.outputs import (OutputFolder, atomic_write, sha256_file, write_csvs,
                              write_parquet)
from pipeline.signals import process_recording
from pipeline.types import SessionInputs, SessionKey, SessionMetrics, Study

CACHE_DIR = "cache/prepare"


# ----------------------------------------------------------------- per-session tasks
@dataclass
class Prepared:
    """Phase-1 result of one session: aligned timeline and signal facts."""

    key: SessionKey
    timeline: pd.DataFrame
    scrs: pd.DataFrame
    clock: ClockMap
    flags: list[str]
    invalid_share: dict[str, float]
    methods: dict[str, str]
    sampling_rate_hz: float
    channels: list[str]
    notes: list[str]
    coverage: dict[str, float]
    recording_nbytes: int = 0


@dataclass
class PrepareTask:
    """Phase-1 work of one session. In local runs the worker itself checks and fills
    the session's cache file (``cache_file``), so hashing inputs, pickling timelines
    and writing them never queue up in the runner's process."""

    inputs: SessionInputs
    cfg: Config
    cache_file: Path | None = None
    fresh: bool = False


@dataclass
class PrepareOutcome:
    """What phase 1 hands back: the session's facts (its timeline only when no cache
    file holds it), the arousal moments for the within-participant z-score, and
    where the result came from."""

    prepared: Prepared
    moments: tuple[int, float, float]
    cache_key: str
    from_cache: bool
    cache_sha256: str | None = None
    #: SHA-256 of the session's recording (hashed for the cache key; reused by the
    #: manifest so the runner does not read the file again)
    recording_sha256: str | None = None


def prepare_session(task: PrepareTask) -> Prepared:
    """Read, process and align one session (pure apart from reading its recording)."""
    inputs, cfg = task.inputs, task.cfg
    signals = None
    channels: list[str] = []
    notes: list[str] = []
    nbytes = 0
    if inputs.recording_path is not None:
        rec = read_recording_checked(inputs.recording_path, cfg.signals,
                                     label=f"signals/{inputs.recording_path.name}")
        channels = sorted(rec.channels)
        notes.extend(rec.notes)
        nbytes = rec.nbytes
        signals = process_recording(rec, cfg.signals)
        del rec
        notes.extend(signals.notes)
    aligned = build_timeline(inputs, signals, cfg.signals)
    return Prepared(
        coverage=_coverage(aligned.timeline),
        key=inputs.key,
        timeline=aligned.timeline,
        scrs=aligned.scrs,
        clock=aligned.clock,
        flags=aligned.flags,
        invalid_share=dict(signals.invalid_share) if signals else {},
        methods=dict(signals.methods) if signals else {},
        sampling_rate_hz=signals.sampling_rate_hz if signals else float("nan"),
        channels=channels,
        notes=notes,
        recording_nbytes=nbytes,
    )


def load_cached(path: Path, key: str) -> Prepared | None:
    """The cached phase-1 result in ``path`` if it was made from the same inputs."""
    if not path.is_file():
        return None
    try:
        with open(path, "rb") as fh:
            stored = pickle.load(fh)
        if stored.get("key") == key:
            return stored["value"]
    except Exception:  # a damaged cache entry is recomputed, never trusted
        pass
    return None


def store_cached(path: Path, key: str, prepared: Prepared) -> str:
    """Write one session's phase-1 result atomically; return the file's SHA-256."""
    data = pickle.dumps({"key": key, "value": prepared}, protocol=pickle.HIGHEST_PROTOCOL)
    atomic_write(path, lambda p: p.write_bytes(data))
    return hashlib.sha256(data).hexdigest()


def prepare_cached(task: PrepareTask) -> PrepareOutcome:
    """Phase 1 of one session, through its cache file when the task names one."""
    rec = task.inputs.recording_path
    rec_sha = sha256_file(rec) if rec is not None else None
    key = _cache_key(task.inputs, task.cfg, rec_sha)
    prep = None
    if task.cache_file is not None and not task.fresh:
        prep = load_cached(task.cache_file, key)
    from_cache = prep is not None
    if prep is None:
        prep = prepare_session(task)
    moments = _moments(prep.timeline, task.cfg)
    sha = None
    if task.cache_file is not None:
        if not from_cache:
            sha = store_cached(task.cache_file, key, prep)
        prep.timeline = None  # the file holds it; phase 3 reads it back there
    return PrepareOutcome(prepared=prep, moments=moments, cache_key=key,
                          from_cache=from_cache, cache_sha256=sha, recording_sha256=rec_sha)


@dataclass
class FinishTask:
    """Phase-3 work of one session. The timeline travels in the task (cluster runs) or
    is re-read from the phase-1 cache file (local runs), so the runner never holds
    every session's timeline in memory at once; in local runs the worker also writes
    the finished timeline to ``timeline_file`` itself."""

    inputs: SessionInputs
    mean: float
    sd: float
    cfg: Config
    seed: int
    timeline: pd.DataFrame | None = None
    cache_file: Path | None = None
    timeline_file: Path | None = None
    #: every coder's rows of this session (second, in_view, attended, coder) when the
    #: study has double-coded sessions, for the session's coder agreement
    agreement_codes: pd.DataFrame | None = None

    def load_timeline(self) -> pd.DataFrame:
        if self.timeline is not None:
            return self.timeline
        with open(self.cache_file, "rb") as fh:
            return pickle.load(fh)["value"].timeline


@dataclass
class Finished:
    key: SessionKey
    timeline: pd.DataFrame | None
    metrics: SessionMetrics
    switch_locked: pd.DataFrame | None
    agreement: SessionAgreement | None = None
    timeline_sha256: str | None = None


def finish_session(task: FinishTask) -> Finished:
    """Arousal z-score, media metrics, switch-locked arousal and coder agreement of one
    session."""
    cfg = task.cfg
    timeline = add_arousal(task.load_timeline(), task.mean, task.sd, cfg.arousal)
    metrics = session_metrics(timeline, task.inputs, cfg)
    locked = switch_locked_session(timeline, metrics.switches, task.seed,
                                   window_s=cfg.models.switch_locked_window_s,
                                   n_pseudo=cfg.models.switch_locked_pseudo)
    agreement = None
    if task.agreement_codes is not None and len(task.agreement_codes):
        agreement = session_agreement(task.inputs.key, task.agreement_codes,
                                      task.inputs.duration_s, cfg.agreement, cfg.switching,
                                      cfg.dwell)
    fin = Finished(key=task.inputs.key, timeline=timeline, metrics=metrics,
                   switch_locked=locked, agreement=agreement)
    if task.timeline_file is not None:
        fin.timeline_sha256 = write_parquet(task.timeline_file, timeline)
        fin.timeline = None
    return fin


class _Lazy:
    """A sequence whose items are built when asked for (one task's data at a time)."""

    def __init__(self, keys: list[int], make: Callable[[int], object]):
        self.keys, self.make = keys, make

    def __len__(self) -> int:
        return len(self.keys)

    def __getitem__(self, j: int):
        return self.make(self.keys[j])

    def __iter__(self):
        return (self.make(k) for k in self.keys)


# -------------------------------------------------------------------- the whole run
@dataclass
class RunResult:
    out: Path
    sessions_total: int
    sessions_ok: int
    failures: list[dict]
    summary: list[str]
    manifest: dict = field(default_factory=dict)

    @property
    def partial(self) -> bool:
        return self.sessions_ok < self.sessions_total


def session_inputs(study: Study, cfg: Config, all_coders: dict[int, pd.DataFrame] | None = None
                   ) -> tuple[list[SessionInputs], list[str]]:
    """Cut each session's inputs out of the study; note which coder each one uses.

    When ``all_coders`` is a dict, it is filled with every coder's rows (second,
    in_view, attended, coder) of each session that has media-log rows, by the
    session's index in the returned list (for coder agreement).
    """
    notes: list[str] = []
    roster = study.roster.set_index("participant_id")["cohort"]
    log = study.media_log
    # the rows of each session, by position (observed=True: the log's ID columns may be
    # categorical, and only the pairs seen are wanted)
    rows_of = log.groupby(["participant_id", "session_id"], sort=False, observed=True).indices
    coded = log[["second", "in_view", "attended", "coder"]]
    codes_only = coded[["second", "in_view", "attended"]]
    coder_col = log["coder"]
    sync = {k: part for k, part in study.sync.groupby(["participant_id", "session_id"],
                                                      sort=False)}
    out = []
    for row in study.sessions.itertuples(index=False):
        key = SessionKey(row.participant_id, row.session_id)
        rows = rows_of.get((key.participant_id, key.session_id))
        if rows is None:
            rows = np.empty(0, dtype=np.intp)
        # a media log written session by session holds each session in one run of
        # rows, which is cut as a view; otherwise the rows are gathered
        run_of_rows = len(rows) > 0 and rows[-1] - rows[0] + 1 == len(rows)
        pick = slice(rows[0], rows[-1] + 1) if run_of_rows else rows
        session_coders = coder_col.iloc[pick]
        coders = sorted(str(c) for c in _distinct(session_coders))
        coder = ""
        if coders:
            wanted = cfg.coding.primary_coder
            coder = wanted if wanted in coders else coders[0]
            if len(coders) > 1:
                notes.append(f"{key.label()}: coded by {', '.join(coders)}; run uses "
                             f"{coder!r}" + (" ([coding] primary_coder)" if wanted in coders
                                             else " (first in sorted order)"))
        # the code columns stay categorical, as ingest made them (compact to ship to
        # workers; the stages take either dtype)
        if all_coders is not None and len(rows):
            all_coders[len(out)] = coded.iloc[pick]
        codes = codes_only.iloc[pick]
        if len(coders) > 1:
            codes = codes[(session_coders == coder).to_numpy()]
        if not codes["second"].is_monotonic_increasing:
            codes = codes.sort_values("second")
        pairs = sync.get((key.participant_id, key.session_id))
        out.append(SessionInputs(
            key=key,
            cohort=str(roster[key.participant_id]),
            duration_s=int(row.duration_s),
            codes=codes.reset_index(drop=True),
            coder=coder,
            sync_pairs=(pairs[["video_s", "sensor_s"]].to_numpy(dtype=float)
                        if pairs is not None else np.empty((0, 2))),
            recording_path=study.recordings.get(key),
            platform_groups=study.platform_groups,
        ))
    return out, notes


def _distinct(values: pd.Series) -> list:
    """The distinct values of a column (by its codes, when it is categorical)."""
    if isinstance(values.dtype, pd.CategoricalDtype):
        seen = np.flatnonzero(np.bincount(values.cat.codes.to_numpy() + 1,
                                          minlength=len(values.cat.categories) + 1)[1:])
        return list(values.cat.categories[seen])
    return list(values.unique())


def _cache_key(inputs: SessionInputs, cfg: Config,
               recording_sha256: str | None = None) -> str:
    """Hash of everything phase 1 reads: version, [signals] settings, the session's
    codes and sync pairs, and its recording's bytes (by their SHA-256)."""
    h = hashlib.sha256()
    h.update(__version__.encode())
    h.update(cfg.signals.fingerprint().encode())
    h.update(str(inputs.duration_s).encode())
    h.update(inputs.sync_pairs.tobytes())
    h.update(pd.util.hash_pandas_object(inputs.codes, index=False).to_numpy().tobytes())
    if inputs.recording_path is not None:
        h.update((recording_sha256 or sha256_file(inputs.recording_path)).encode())
    return h.hexdigest()


def _combine_moments(parts: list[tuple[int, float, float]]) -> tuple[float, float, int]:
    """Pool (n, mean, M2) of several sessions (Chan et al. 1979 parallel update)."""
    n, mean, m2 = 0, 0.0, 0.0
    for nb, mb, m2b in parts:
        if nb == 0:
            continue
        delta = mb - mean
        tot = n + nb
        mean += delta * nb / tot
        m2 += m2b + delta**2 * n * nb / tot
        n = tot
    sd = float(np.sqrt(m2 / (n - 1))) if n >= 2 else float("nan")
    return mean, sd, n


def _moments(timeline: pd.DataFrame, cfg: Config) -> tuple[int, float, float]:
    vals = arousal_source(timeline, cfg.arousal)
    vals = vals[timeline["signal_valid"].to_numpy(dtype=bool)].to_numpy(dtype=float)
    vals = vals[np.isfinite(vals)]
    if len(vals) == 0:
        return 0, 0.0, 0.0
    mean = float(vals.mean())
    return len(vals), mean, float(((vals - mean) ** 2).sum())


def _coverage(tl: pd.DataFrame) -> dict[str, float]:
    """Coverage facts of one timeline for QC: coded share, uncoded stretches, usable share."""
    coded = tl["coded"].to_numpy(dtype=bool)
    # number of uncoded stretches inside the session
    gaps = int(np.count_nonzero(np.diff(np.concatenate([[0], (~coded).astype(np.int8)])) == 1))
    valid_coded = float((tl["signal_valid"].to_numpy(dtype=bool) & coded).sum())
    return {
        "coded_seconds": int(coded.sum()),
        "coverage": float(coded.mean()) if len(coded) else 0.0,
        "uncoded_seconds": int((~coded).sum()),
        "coverage_gaps": gaps,
        "usable_share": valid_coded / coded.sum() if coded.sum() else 0.0,
    }


def _qc_row(inp: SessionInputs, prep: Prepared, metrics: SessionMetrics | None,
            cfg: Config) -> dict:
    cov = prep.coverage
    usable_share = cov["usable_share"]
    flags = list(prep.flags) + (metrics.flags if metrics else [])
    usable = bool(inp.recording_path is not None and usable_share >= cfg.qc.min_usable_share)
    reason = ""
    if inp.recording_path is None:
        reason = "no recording"
    elif not usable:
        reason = (f"valid signal in {usable_share:.0%} of coded time, below "
                  f"[qc] min_usable_share {cfg.qc.min_usable_share:.0%}")
        flags.append("low_usable_share")
    row = {
        "participant_id": inp.key.participant_id,
        "session_id": inp.key.session_id,
        "cohort": inp.cohort,
        "coder": inp.coder,
        "duration_s": inp.duration_s,
        "coded_seconds": cov["coded_seconds"],
        "coverage": cov["coverage"],
        "uncoded_seconds": cov["uncoded_seconds"],
        "coverage_gaps": cov["coverage_gaps"],
        "recording": inp.recording_path.name if inp.recording_path else "",
        "sampling_rate_hz": prep.sampling_rate_hz,
        "channels": ";".join(prep.channels),
        "sync_pairs": prep.clock.n_pairs,
        "sync_offset_s": prep.clock.offset_s,
        "sync_drift_ppm": prep.clock.drift_ppm,
        "sync_residual_s": prep.clock.residual_s,
        "usable_share": usable_share,
    }
    for rule, share in sorted(prep.invalid_share.items()):
        row[f"invalid_share_{rule}"] = float(share)
    row.update({"usable": usable, "exclusion_reason": reason,
                "flags": ";".join(dict.fromkeys(flags))})
    return row


class Progress:
    """A tqdm bar over sessions on stderr (quiet when asked)."""

    def __init__(self, total: int, desc: str, quiet: bool):
        from tqdm import tqdm

        self.bar = tqdm(total=total, desc=desc, unit="session", disable=quiet,
                        file=sys.stderr, leave=False)

    def step(self) -> None:
        self.bar.update(1)

    def close(self) -> None:
        self.bar.close()


def run_study(target: str | Path, out: str | Path, *, workers: int = 1,
              cluster: str | None = None, keep_going: bool = False, fresh: bool = False,
              quiet: bool = False, report: bool = True,
              log: Callable[[str], None] = print) -> RunResult:
    """Run the whole pipeline on a study folder or study .toml; write OUT."""
    started = time.perf_counter()
    folder, cfg, cfg_file = resolve_study(target)
    # Local workers start before the study is read, so they do not inherit its tables;
    # one pool serves both per-session phases.
    with TaskPool(workers, cluster) as pool:
        return _run(pool, folder, cfg, cfg_file, out, started=started, keep_going=keep_going,
                    fresh=fresh, quiet=quiet, report=report)


def _run(pool: TaskPool, folder: Path, cfg: Config, cfg_file: Path | None, out: str | Path, *,
         started: float, keep_going: bool, fresh: bool, quiet: bool, report: bool
         ) -> RunResult:
    timings: dict[str, float] = {}
    _arrow_threads(pool.workers if pool.local_files else 1)
    study = load_study(folder, cfg)
    timings["ingest_s"] = time.perf_counter() - started
    outdir = OutputFolder(Path(out))
    multi_coded = _multi_coded(study)
    if multi_coded:
        from pipeline.agreement.tables import check_reserved_code

        check_reserved_code(study.media_log)
    all_coders: dict[int, pd.DataFrame] | None = {} if multi_coded else None
    inputs, coder_notes = session_inputs(study, cfg, all_coders)
    total = len(inputs)
    failures: list[dict] = []

    def failed(inp: SessionInputs, stage: str, outcome: Outcome) -> None:
        failures.append({"participant_id": inp.key.participant_id,
                         "session_id": inp.key.session_id, "stage": stage,
                         "error": outcome.error, "hint": outcome.hint or ""})
        if not keep_going:
            raise StageError(outcome.error or "failed", unit=inp.key.label(), stage=stage,
                             hint=(outcome.hint or "") + "; use --keep-going to run the "
                             "other sessions and list every failure")

    # -- phase 1: signals + align, cached per session
    t0 = time.perf_counter()
    return_freed_memory()  # ingest's temporary arrays
    if pool.runs_here:
        # Serial runs do the per-session work in this process: from here on keep
        # freed memory for the next session's arrays.
        keep_freed_memory()
    prepared: dict[int, Prepared] = {}
    moments: dict[int, tuple[int, float, float]] = {}
    cache_file = {i: outdir.path(f"{CACHE_DIR}/{inp.key.stem()}.pkl")
                  for i, inp in enumerate(inputs)}
    if pool.local_files:
        # the workers check and fill the cache files themselves
        todo = list(range(total))
        tasks = [PrepareTask(inputs[i], cfg, cache_file=cache_file[i], fresh=fresh)
                 for i in todo]
    else:
        # cluster workers may not see this file system: the cache stays with the runner
        todo = []
        for i, inp in enumerate(inputs):
            hit = None if fresh else load_cached(cache_file[i], _cache_key(inp, cfg))
            if hit is not None:
                moments[i] = _moments(hit.timeline, cfg)
                hit.timeline = None
                prepared[i] = hit
            else:
                todo.append(i)
        tasks = [PrepareTask(inputs[i], cfg) for i in todo]
    cached = len(prepared)
    input_sha256: dict[Path, str] = {}
    bar = Progress(total, "signals", quiet)
    for _ in prepared:
        bar.step()
    try:
        for j, outcome in pool.map(prepare_cached, tasks, stop_on_error=not keep_going):
            i = todo[j]
            bar.step()
            if not outcome.ok:
                failed(inputs[i], "signals", outcome)
                continue
            res: PrepareOutcome = outcome.value
            cached += res.from_cache
            if res.prepared.timeline is not None:  # cluster run: store it here
                res.cache_sha256 = store_cached(cache_file[i], res.cache_key, res.prepared)
                res.prepared.timeline = None
            if res.cache_sha256:
                outdir.record(cache_file[i], "cache", res.cache_sha256)
            prepared[i] = res.prepared
            moments[i] = res.moments
            if res.recording_sha256:
                input_sha256[inputs[i].recording_path] = res.recording_sha256
    finally:
        bar.close()
    timings["signals_s"] = time.perf_counter() - t0

    # -- phase 2: within-participant arousal moments (Chan et al. pooling)
    by_participant: dict[str, list[tuple[int, float, float]]] = {}
    for i in sorted(prepared):
        by_participant.setdefault(inputs[i].key.participant_id, []).append(moments[i])
    zstats = {pid: _combine_moments(parts) for pid, parts in by_participant.items()}

    # -- phase 3: per-session metrics (and coder agreement)
    t0 = time.perf_counter()
    order = sorted(prepared)

    def finish_task(i: int) -> FinishTask:
        inp = inputs[i]
        pid = inp.key.participant_id
        task = FinishTask(inp, zstats[pid][0], zstats[pid][1], cfg,
                          seed=session_seed(pid, inp.key.session_id),
                          cache_file=cache_file[i],
                          agreement_codes=all_coders.get(i) if all_coders is not None
                          else None)
        if pool.local_files:
            task.timeline_file = outdir.path(f"timeline/{inp.key.stem()}.parquet")
        else:  # workers may not see this file system: ship the timeline
            task.timeline = task.load_timeline()
        return task

    finish_tasks = _Lazy(order, finish_task)
    finished: dict[int, Finished] = {}
    bar = Progress(len(finish_tasks), "metrics", quiet)
    try:
        for j, outcome in pool.map(finish_session, finish_tasks, stop_on_error=not keep_going):
            i = order[j]
            bar.step()
            if not outcome.ok:
                failed(inputs[i], "metrics", outcome)
                continue
            fin: Finished = outcome.value
            finished[i] = fin
            rel = f"timeline/{fin.key.stem()}.parquet"
            if fin.timeline is not None:  # cluster run: write it here
                outdir.parquet(rel, fin.timeline, "align")
                fin.timeline = None  # free the memory; the file holds it now
            else:
                outdir.record(outdir.path(rel), "align", fin.timeline_sha256)
    finally:
        bar.close()
    timings["metrics_s"] = time.perf_counter() - t0

    # -- phase 5: group tables
    ok = sorted(finished)
    qc = pd.DataFrame([_qc_row(inputs[i], prepared[i], finished[i].metrics, cfg) for i in ok])
    usable = qc.set_index(["participant_id", "session_id"])["usable"] if len(qc) else None

    def stack(attr: str) -> pd.DataFrame:
        frames = [getattr(finished[i].metrics, attr) for i in ok]
        frames = [f for f in frames if f is not None and len(f)]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()

    sessions = pd.DataFrame([finished[i].metrics.session for i in ok])
    if len(sessions):
        sessions["usable"] = [bool(usable.loc[(p, s)]) for p, s in
                              sessions[["participant_id", "session_id"]].itertuples(index=False)]
    tables = {
        "metrics/sessions.csv": sessions,
        "metrics/states.csv": stack("states"),
        "metrics/platforms.csv": stack("platforms"),
        "metrics/groups.csv": stack("groups"),
        "metrics/bouts.csv": stack("bouts"),
        "metrics/switches.csv": stack("switches"),
        "qc/sessions.csv": qc,
    }
    scr_frames = []
    for i in ok:
        s = prepared[i].scrs
        if len(s):
            s = s.copy()
            s.insert(0, "session_id", inputs[i].key.session_id)
            s.insert(0, "participant_id", inputs[i].key.participant_id)
            scr_frames.append(s)
    tables["signals/scrs.csv"] = (pd.concat(scr_frames, ignore_index=True) if scr_frames else
                                  pd.DataFrame(columns=["participant_id", "session_id",
                                                        "onset_video_s", "peak_video_s",
                                                        "amplitude_us", "rise_time_s",
                                                        "half_recovery_s"]))
    # The session tables are written by a worker (on a local pool) while this process
    # goes on with the group analyses.
    writes = [(outdir.path(rel), df) for rel, df in tables.items()]
    tables_pending = pool.submit(write_csvs, writes)

    summary = [f"ran {len(ok)} of {total} sessions"
               + (f" ({cached} from cache)" if cached else "")]
    methods: dict[str, dict] = {"signals": _signal_methods([prepared[i].methods for i in ok])}
    summary += _describe(study, cfg, sessions, qc)
    if coder_notes:
        summary.append(f"{len(coder_notes)} session(s) coded by several coders; run uses one "
                       "coder per session (each is named in qc/sessions.csv; `screenweave "
                       "agree` compares them)")
    details = list(coder_notes)

    # -- models and group analyses
    t0 = time.perf_counter()
    analysis_lines = _group_analyses(pool, study, cfg, tables, finished, ok, outdir,
                                     methods)
    details += analysis_lines
    summary += _headlines(analysis_lines)
    if analysis_lines:
        outdir.text("models/summary.txt", "\n".join(analysis_lines) + "\n", "models")
        summary.append("full model summary: models/summary.txt")
    timings["models_s"] = time.perf_counter() - t0
    written = tables_pending.result()
    if not written.ok:  # write here, so that the error is raised with its own details
        written.value = write_csvs(writes)
    for (target, _), sha in zip(writes, written.value):
        outdir.record(target, target.relative_to(outdir.root).parts[0], sha)

    manifest = {
        "tool": "screenweave",
        "version": __version__,
        "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "study": cfg.study.name,
        "study_folder": str(folder),
        "config_file": str(cfg_file) if cfg_file else None,
        "config": cfg.model_dump(mode="json"),
        "platform_groups": study.platform_groups,
        "vocabulary_declared": study.vocabulary_declared,
        "inputs": {str(p.relative_to(folder)) if p.is_relative_to(folder) else str(p):
                   input_sha256.get(p) or sha256_file(p) for p in study.input_files},
        "versions": _versions(),
        "methods": methods,
        "sessions_total": total,
        "sessions_ok": len(ok),
        "sessions_from_cache": cached,
        "failures": failures,
        "warnings": study.warnings,
        "summary": summary,
        "details": details,
    }
    if report:
        t0 = time.perf_counter()
        summary += _build_report(outdir, manifest)
        timings["report_s"] = time.perf_counter() - t0
    timings["total_s"] = time.perf_counter() - started
    manifest["timings_s"] = timings
    manifest["outputs"] = outdir.hashes()
    outdir.json("manifest.json", manifest, "runner")
    return RunResult(out=outdir.root, sessions_total=total, sessions_ok=len(ok),
                     failures=failures, summary=summary, manifest=manifest)


def _signal_methods(per_session: list[dict[str, str]]) -> dict[str, str]:
    """Each signal-processing step that ran, with its method sentence and reference."""
    from pipeline.signals.methods import describe_methods

    union: dict[str, set[str]] = {}
    for methods in per_session:
        for step, key in methods.items():
            union.setdefault(step, set()).add(str(key))
    out = {}
    for step, keys in union.items():
        value = ";".join(sorted(keys))
        text = " ".join(describe_methods({step: value}))
        out[step] = text or value
    return out


def _headlines(lines: list[str]) -> list[str]:
    """The model lines worth a terminal: the switch-rate comparison and the discoveries."""
    picked = [ln for ln in lines if ln.startswith("models:")]
    picked += [ln for ln in lines if ln.startswith("switches_per_hour,")]
    picked += [ln for ln in lines if "a discovery at false discovery rate" in ln
               and ln not in picked]
    picked += [ln for ln in lines if ln.startswith("switch rate,") and "disagree" in ln]
    picked += [ln for ln in lines if ln.startswith(("agreement:", "  attended platform:"))]
    return picked


def _describe(study: Study, cfg: Config, sessions: pd.DataFrame, qc: pd.DataFrame) -> list[str]:
    lines = []
    if len(sessions):
        per = sessions.groupby("cohort").size()
        lines.append("sessions per cohort: " + ", ".join(f"{c} {n}" for c, n in per.items()))
        rate = sessions.groupby("cohort")["switches_per_hour"].mean()
        lines.append("mean switches per multi-platform hour: " + ", ".join(
            f"{c} {v:.1f}" if np.isfinite(v) else f"{c} n/a" for c, v in rate.items()))
    if len(qc):
        counts: dict[str, int] = {}
        for f in qc["flags"]:
            for flag in filter(None, str(f).split(";")):
                counts[flag] = counts.get(flag, 0) + 1
        lines.append("flags raised: " + (", ".join(f"{k} ({v})" for k, v in sorted(counts.items()))
                                         or "none"))
        n_unusable = int((~qc["usable"]).sum())
        if n_unusable:
            lines.append(f"{n_unusable} session(s) flagged unusable"
                         + (" and left out of the models" if cfg.qc.exclude_flagged_from_models
                            else ""))
    if not study.vocabulary_declared:
        lines.append("no [platforms] vocabulary declared; codes seen: "
                     + ", ".join(sorted(study.platform_groups)))
    return lines


def _group_analyses(pool: TaskPool, study: Study, cfg: Config,
                    tables: dict[str, pd.DataFrame],
                    finished: dict[int, Finished], ok: list[int], outdir: OutputFolder,
                    methods: dict) -> list[str]:
    """Models, switch-locked arousal, coder agreement and survey comparisons."""
    m = cfg.models
    lines: list[str] = []
    # The cohort models run in a worker (on a local pool) while this process does the
    # switch-locked summary and the agreement tables.
    model_args = (tables["metrics/sessions.csv"], tables["metrics/states.csv"],
                  tables["metrics/groups.csv"], study.roster, m, cfg.cohorts,
                  cfg.qc.exclude_flagged_from_models)
    models_pending = pool.submit(_compare_task, model_args)
    more_lines = _switch_locked(study, cfg, finished, ok, outdir, methods)
    agreement_lines = _agreement(study, cfg, outdir, methods, finished, ok)
    outcome = models_pending.result()
    # a failure is re-raised here with its own type and details, by fitting again
    results = outcome.value if outcome.ok else _compare_task(model_args)
    outdir.csv("models/comparisons.csv", results.comparisons, "models")
    outdir.csv("models/variance_components.csv", results.variances, "models")
    methods["models"] = dict(results.methods) | methods.pop("switch_locked")
    if "agreement" in methods:  # keep the manifest's order: signals, models, agreement
        methods["agreement"] = methods.pop("agreement")
    lines += results.summary + more_lines + agreement_lines
    if study.survey is not None:
        table = compare_survey(study.survey, study.roster, m.fdr_q, method=m.survey_method,
                               reference=cfg.cohorts.reference,
                               items=cfg.survey.items or None,
                               min_participants=cfg.cohorts.min_participants,
                               fdr_method=m.fdr_method, confidence=m.confidence_level)
        outdir.csv("models/survey.csv", table, "models")
        methods["models"].update(survey_methods(m.survey_method, m.fdr_method))
    return lines


def _compare_task(args: tuple) -> ModelResults:
    """The cohort comparisons as one task (arguments as one tuple, for the pool)."""
    sessions, states, groups, roster, models_cfg, cohorts_cfg, exclude = args
    return compare(sessions, states, groups, roster, models_cfg, cohorts_cfg,
                   exclude_unusable=exclude)


def _switch_locked(study: Study, cfg: Config, finished: dict[int, Finished], ok: list[int],
                   outdir: OutputFolder, methods: dict) -> list[str]:
    """Switch-locked arousal: the cohort trajectories and their test."""
    m = cfg.models
    parts = [finished[i].switch_locked for i in ok
             if finished[i].switch_locked is not None and len(finished[i].switch_locked)]
    per_session = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()
    traj, test, more = switch_locked_summary(
        per_session, study.roster, pre_s=m.switch_locked_pre_s,
        min_events=m.min_switch_events, confidence=m.confidence_level,
        reference=cfg.cohorts.reference)
    outdir.csv("metrics/switch_locked.csv", traj, "metrics")
    outdir.csv("models/switch_locked_test.csv", test, "models")
    methods["switch_locked"] = switch_locked_methods(m.switch_locked_window_s,
                                                     m.switch_locked_pre_s)
    return more


def _multi_coded(study: Study) -> bool:
    """True when some session of the media log is coded by two or more coders."""
    per_session = study.media_log.groupby(["participant_id", "session_id"],
                                          observed=True)["coder"].nunique()
    return bool((per_session > 1).any())


def _agreement(study: Study, cfg: Config, outdir: OutputFolder, methods: dict,
               finished: dict[int, Finished], ok: list[int]) -> list[str]:
    """Coder agreement tables, from the sessions' own agreement results (phase 3),
    where some session is coded by two or more coders."""
    from pipeline.agreement.summary import agreement_methods, summary_lines
    from pipeline.agreement.tables import agreement_tables

    results = [finished[i].agreement for i in ok if finished[i].agreement is not None]
    if not any(len(r.coders) > 1 for r in results):
        return []
    results.sort(key=lambda r: (r.key.participant_id, r.key.session_id))
    tables = agreement_tables(results, cfg.agreement.switch_tolerance_s,
                              cfg.agreement.switch_matching)
    for name, table in tables.items():
        outdir.csv(f"agreement/{name}", table, "agreement")
    methods["agreement"] = agreement_methods(cfg.agreement.switch_tolerance_s,
                                             cfg.agreement.switch_matching)
    return summary_lines(tables["study.csv"].iloc[0].to_dict(), len(study.sessions),
                         len(tables["alpha.csv"]))


def _arrow_threads(n: int) -> None:
    """Let Arrow's readers in this process use ``n`` threads (one for ``--workers 1``,
    so that a serial run really runs on one core)."""
    import pyarrow

    pyarrow.set_cpu_count(max(1, n))


def _build_report(outdir: OutputFolder, manifest: dict) -> list[str]:
    from pipeline.report import build_report as build

    outdir.json("manifest.json", manifest, "runner")  # the report reads it
    written = build(outdir.root)
    for p in written:
        outdir.record(Path(p), "report")
    return [f"report: {len(written)} files (charts, report.html, deck.pptx)"]


def _versions() -> dict[str, str]:
    import importlib.metadata as md

    out = {"python": platform.python_version()}
    for dist in ("numpy", "pandas", "scipy", "statsmodels", "pyarrow", "pydantic", "altair",
                 "vl-convert-python", "python-pptx"):
        try:
            out[dist] = md.version(dist)
        except md.PackageNotFoundError:
            pass
    return out


__all__ = ["run_study", "RunResult", "prepare_session", "finish_session", "ScreenweaveError"]
