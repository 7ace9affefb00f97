"""The runner: reads the study, runs the stages, writes the run's files.

Stages themselves compute and never touch files; this module is the only one that
does I/O for `screenweave run`. The order is:

1. ingest, first half: roster, sessions, sync and the recordings (refused early, with
   every problem listed);
2. per session (parallel): read recording -> signals -> on the video clock, cached on
   a hash of the session's recording, sync pairs and the ``[signals]`` settings. This
   needs no media codes, so it starts at once and the runner reads (and checks) the
   media log meanwhile;
3. per participant, as soon as all of its sessions have their signals: the mean and
   SD for the within-participant arousal z-score;
4. per session (parallel): the codes joined to the signals, arousal, media metrics,
   switch-locked arousal and coder agreement;
5. group: QC, models, survey, then the tables, manifest, charts, report and deck.
"""

from __future__ import annotations

import dataclasses
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
from pipeline.align.timeline import align_signals, join_codes
from pipeline.config import Config, resolve_study
from pipeline.errors import ScreenweaveError, StageError
from pipeline.execution import (STAGE_MODULES, Outcome, TaskPool, keep_freed_memory,
                                 map_big_arrays, return_freed_memory)
from pipeline.ingest import StudyHead, read_recording_checked, read_study_head, read_study_rest
from pipeline.ingest.media_log import session_runs
from pipeline.metrics.arousal import add_arousal, arousal_source
from pipeline.outputs import (OutputFolder, atomic_write, csv_bytes, row_blocks, sha256_file,
                              write_parquet)
from pipeline.types import (RecordingInputs, SessionInputs, SessionKey, SessionMetrics,
                            Study)

CACHE_DIR = "cache/prepare"
#: A session table this long or longer is turned into CSV text by several workers.
CSV_BLOCK_ROWS = 20_000

# ----------------------------------------------------------------- per-session tasks
@dataclass
class Prepared:
    """Phase-1 result of one session: its recording on the video clock, per second
    (``seconds``, :attr:`~pipeline.align.timeline.AlignedSignals.columns`), and the
    signal facts."""

    key: SessionKey
    seconds: pd.DataFrame | None
    scrs: pd.DataFrame
    clock: ClockMap
    flags: list[str]
    invalid_share: dict[str, float]
    methods: dict[str, str]
    sampling_rate_hz: float
    channels: list[str]
    notes: list[str]
    recording_nbytes: int = 0


@dataclass
class PrepareTask:
    """Phase-1 work of one session. In local runs the worker itself checks and fills
    the session's cache file (``cache_file``), so hashing inputs, pickling the
    per-second signals and writing them never queue up in the runner's process."""

    inputs: RecordingInputs
    cfg: Config
    cache_file: Path | None = None
    fresh: bool = False


@dataclass
class PrepareOutcome:
    """What phase 1 hands back: the session's facts (its per-second signals only when
    no cache file holds them), the arousal moments for the within-participant z-score,
    and where the result came from."""

    prepared: Prepared
    moments: tuple[int, float, float]
    cache_key: str
    from_cache: bool
    cache_sha256: str | None = None
    #: SHA-256 of the session's recording (hashed for the cache key; reused by the
    #: manifest so the runner does not read the file again)
    recording_sha256: str | None = None


def prepare_session(task: PrepareTask) -> Prepared:
    """Read, process and put on the video clock one session's recording (pure apart
    from reading it)."""
    from pipeline.signals import process_recording

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
    aligned = align_signals(inputs.key, inputs.duration_s, inputs.sync_pairs, signals,
                            cfg.signals)
    return Prepared(
        key=inputs.key,
        seconds=aligned.columns,
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
    moments = _moments(prep.seconds, task.cfg)
    sha = None
    if task.cache_file is not None:
        if not from_cache:
            sha = store_cached(task.cache_file, key, prep)
        prep.seconds = None  # the file holds them; phase 3 reads them back there
    return PrepareOutcome(prepared=prep, moments=moments, cache_key=key,
                          from_cache=from_cache, cache_sha256=sha, recording_sha256=rec_sha)


@dataclass
class FinishTask:
    """Phase-3 work of one session. The per-second signals travel in the task (cluster
    runs) or are re-read from the phase-1 cache file (local runs), so the runner never
    holds every session's timeline in memory at once; in local runs the worker also
    writes the finished timeline to ``timeline_file`` itself."""

    inputs: SessionInputs
    mean: float
    sd: float
    cfg: Config
    seconds: pd.DataFrame | None = None
    cache_file: Path | None = None
    timeline_file: Path | None = None
    #: every coder's rows of this session (second, in_view, attended, coder) when the
    #: study has double-coded sessions, for the session's coder agreement
    agreement_codes: pd.DataFrame | None = None

    def load_seconds(self) -> pd.DataFrame:
        if self.seconds is not None:
            return self.seconds
        with open(self.cache_file, "rb") as fh:
            return pickle.load(fh)["value"].seconds


@dataclass
class Finished:
    key: SessionKey
    timeline: pd.DataFrame | None
    metrics: SessionMetrics
    switch_locked: pd.DataFrame | None
    coverage: dict[str, float]
    agreement: SessionAgreement | None = None
    timeline_sha256: str | None = None


def finish_session(task: FinishTask) -> Finished:
    """The codes joined to the per-second signals, then arousal z-score, media metrics,
    switch-locked arousal and coder agreement of one session."""
    from pipeline.metrics.session import session_metrics
    from pipeline.metrics.switch_locked import session_seed, switch_locked_session

    cfg = task.cfg
    timeline = join_codes(task.inputs, task.load_seconds())
    timeline = add_arousal(timeline, task.mean, task.sd, cfg.arousal)
    metrics = session_metrics(timeline, task.inputs, cfg)
    locked = switch_locked_session(timeline, metrics.switches,
                                   session_seed(task.inputs.key.participant_id,
                                                task.inputs.key.session_id),
                                   window_s=cfg.models.switch_locked_window_s,
                                   n_pseudo=cfg.models.switch_locked_pseudo)
    agreement = None
    if task.agreement_codes is not None and len(task.agreement_codes):
        agreement = session_agreement(task.inputs.key, task.agreement_codes,
                                      task.inputs.duration_s, cfg.agreement, cfg.switching,
                                      cfg.dwell)
    fin = Finished(key=task.inputs.key, timeline=timeline, metrics=metrics,
                   switch_locked=locked, coverage=_coverage(timeline), agreement=agreement)
    if task.timeline_file is not None:
        fin.timeline_sha256 = write_parquet(task.timeline_file, timeline)
        fin.timeline = None
    return fin


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


def session_inputs(study: Study, cfg: Config, recordings: list[RecordingInputs],
                   all_coders: dict[int, pd.DataFrame] | None = None
                   ) -> tuple[list[SessionInputs], list[str]]:
    """Cut each session's inputs out of the study; note which coder each one uses.
    ``recordings`` are the sessions' :func:`recording_inputs`, in the same order.

    When ``all_coders`` is a dict, it is filled with every coder's rows (second,
    in_view, attended, coder) of each session that has media-log rows, by the
    session's index in the returned list (for coder agreement).
    """
    notes: list[str] = []
    roster = study.roster.set_index("participant_id")["cohort"]
    log = study.media_log
    runs = session_runs(log)  # each session's rows are one run of the sorted log
    out = []
    for rec in recordings:
        key = rec.key
        run = runs.get((key.participant_id, key.session_id))
        pick = run.rows if run is not None else slice(0, 0)
        n_rows = pick.stop - pick.start
        rows = log.iloc[pick]  # a view: only the columns taken below are copied
        session_coders = rows["coder"]
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
        if all_coders is not None and n_rows:
            all_coders[len(out)] = rows[["second", "in_view", "attended", "coder"]]
        codes = rows[["second", "in_view", "attended"]]
        if len(coders) > 1:
            codes = codes[(session_coders == coder).to_numpy()]
        if not codes["second"].is_monotonic_increasing:
            codes = codes.sort_values("second")
        out.append(SessionInputs(
            key=key,
            cohort=str(roster[key.participant_id]),
            duration_s=rec.duration_s,
            codes=codes.reset_index(drop=True),
            coder=coder,
            sync_pairs=rec.sync_pairs,
            recording_path=rec.recording_path,
            platform_groups=study.platform_groups,
        ))
    return out, notes


def recording_inputs(head: StudyHead) -> list[RecordingInputs]:
    """Each session's recording, duration and sync pairs, in the order of sessions.csv."""
    sync = {k: part for k, part in head.sync.groupby(["participant_id", "session_id"],
                                                     sort=False)}
    out = []
    for row in head.sessions.itertuples(index=False):
        key = SessionKey(row.participant_id, row.session_id)
        pairs = sync.get((key.participant_id, key.session_id))
        out.append(RecordingInputs(
            key=key,
            duration_s=int(row.duration_s),
            sync_pairs=(pairs[["video_s", "sensor_s"]].to_numpy(dtype=float)
                        if pairs is not None else np.empty((0, 2))),
            recording_path=head.recordings.get(key),
        ))
    return out


def _distinct(values: pd.Series) -> list:
    """The distinct values of a column (by its codes, when it is categorical)."""
    if isinstance(values.dtype, pd.CategoricalDtype):
        seen = np.flatnonzero(np.bincount(values.cat.codes.to_numpy() + 1,
                                          minlength=len(values.cat.categories) + 1)[1:])
        return list(values.cat.categories[seen])
    return list(values.unique())


def _cache_key(inputs: RecordingInputs, cfg: Config,
               recording_sha256: str | None = None) -> str:
    """Hash of everything phase 1 reads: version, [signals] settings, the session's
    duration and sync pairs, and its recording's bytes (by their SHA-256). The media
    codes are not among them: recoding a session keeps its signals cached."""
    h = hashlib.sha256()
    h.update(__version__.encode())
    h.update(cfg.signals.fingerprint().encode())
    h.update(str(inputs.duration_s).encode())
    h.update(np.ascontiguousarray(inputs.sync_pairs, dtype=float).tobytes())
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


def _moments(seconds: pd.DataFrame, cfg: Config) -> tuple[int, float, float]:
    """(n, mean, M2) of the arousal source over one session's valid seconds."""
    vals = arousal_source(seconds, cfg.arousal)
    vals = vals[seconds["signal_valid"].to_numpy(dtype=bool)].to_numpy(dtype=float)
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


def _qc_row(inp: SessionInputs, prep: Prepared, fin: Finished, cfg: Config) -> dict:
    cov = fin.coverage
    usable_share = cov["usable_share"]
    flags = list(prep.flags) + fin.metrics.flags
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

    def __init__(self, total: int, desc: str, quiet: bool, position: int = 0):
        from tqdm import tqdm

        self.bar = tqdm(total=total, desc=desc, unit="session", disable=quiet,
                        file=sys.stderr, leave=False, position=position)

    def step(self) -> None:
        self.bar.update(1)

    def close(self) -> None:
        self.bar.close()


class Sessions:
    """The per-session work of a run as it unfolds on the pool.

    Every session's signal task (phase 1) is queued at once: it needs no media codes,
    and what it sends and returns is small (its per-second signals go to its cache
    file). A participant's metrics tasks (phase 3) are queued as soon as all of its
    sessions have their signals and the media log has been read, so the pool never
    waits at a barrier between the phases. Results are gathered in ``prepared``,
    ``finished`` and ``failures`` by session index; without ``keep_going`` the first
    failure raises :class:`StageError` (call :meth:`close` to drop queued tasks).
    """

    def __init__(self, pool: TaskPool, recs: list[RecordingInputs], cfg: Config,
                 outdir: OutputFolder, *, fresh: bool, keep_going: bool, quiet: bool):
        self.pool, self.recs, self.cfg, self.outdir = pool, recs, cfg, outdir
        self.fresh, self.keep_going = fresh, keep_going
        self.cache_file = {i: outdir.path(f"{CACHE_DIR}/{rec.key.stem()}.pkl")
                           for i, rec in enumerate(recs)}
        self.pending: dict = {}  # future -> ("signals" | "metrics", session index)
        self.prepared: dict[int, Prepared] = {}
        self.moments: dict[int, tuple[int, float, float]] = {}
        self.finished: dict[int, Finished] = {}
        self.failures: list[dict] = []
        self.cached = 0
        self.input_sha256: dict[Path, str] = {}
        self.sessions_of: dict[str, list[int]] = {}
        for i, rec in enumerate(recs):
            self.sessions_of.setdefault(rec.key.participant_id, []).append(i)
        self.without_signals = {pid: len(v) for pid, v in self.sessions_of.items()}
        self.ready: list[str] = []  # participants whose metrics wait for the media log
        self.inputs: list[SessionInputs] | None = None
        self.all_coders: dict[int, pd.DataFrame] | None = None
        self.t0 = time.perf_counter()
        self.signals_done = self.metrics_done = 0.0
        self.metrics_start: float | None = None
        self.bars = (Progress(len(recs), "signals", quiet, 0),
                     Progress(len(recs), "metrics", quiet, 1))

    # -- queueing
    def queue_signals(self) -> None:
        """Queue every session's signal task (cluster runs: those not cached here)."""
        for i, rec in enumerate(self.recs):
            if self.pool.local_files:  # the workers check and fill the cache files
                task = PrepareTask(rec, self.cfg, cache_file=self.cache_file[i],
                                   fresh=self.fresh)
            else:  # cluster workers may not see this file system: the cache stays here
                hit = None if self.fresh else load_cached(self.cache_file[i],
                                                          _cache_key(rec, self.cfg))
                if hit is not None:
                    self.moments[i] = _moments(hit.seconds, self.cfg)
                    hit.seconds = None
                    self.prepared[i] = hit
                    self.cached += 1
                    self._signals_over(i)
                    continue
                task = PrepareTask(rec, self.cfg)
            self.pending[self.pool.start_task(prepare_cached, task)] = ("signals", i)

    def finish_with(self, inputs: list[SessionInputs],
                    all_coders: dict[int, pd.DataFrame] | None) -> None:
        """The media log is read: queue the metrics of every participant ready so far."""
        self.inputs, self.all_coders = inputs, all_coders
        ready, self.ready = self.ready, []
        for pid in ready:
            self._queue_metrics(pid)

    def _signals_over(self, i: int) -> None:
        self.bars[0].step()
        pid = self.recs[i].key.participant_id
        self.without_signals[pid] -= 1
        if self.without_signals[pid] == 0:
            if self.inputs is None:
                self.ready.append(pid)
            else:
                self._queue_metrics(pid)

    def _queue_metrics(self, pid: str) -> None:
        """Pool the participant's arousal moments (Chan et al. 1979) and queue the
        metrics task of each of its sessions that has its signals."""
        done = [i for i in self.sessions_of[pid] if i in self.prepared]
        mean, sd, _ = _combine_moments([self.moments[i] for i in done])
        if self.metrics_start is None:
            self.metrics_start = time.perf_counter()
        for i in done:
            inp = self.inputs[i]
            # the task takes the session's rows of every coder: this process needs
            # them no more
            task = FinishTask(inp, mean, sd, self.cfg, cache_file=self.cache_file[i],
                              agreement_codes=(self.all_coders.pop(i, None)
                                               if self.all_coders is not None else None))
            if self.pool.local_files:
                task.timeline_file = self.outdir.path(f"timeline/{inp.key.stem()}.parquet")
            else:  # workers may not see this file system: ship the per-second signals
                task.seconds = task.load_seconds()
            self.pending[self.pool.start_task(finish_session, task)] = ("metrics", i)

    # -- gathering
    def run(self) -> None:
        """Gather results until every queued task has finished."""
        while self.pending:
            for fut in self.pool.next_done(self.pending):
                kind, i = self.pending.pop(fut)
                if kind == "signals":
                    self._signals_in(i, fut.result())
                else:
                    self._metrics_in(i, fut.result())

    def _signals_in(self, i: int, outcome: Outcome) -> None:
        self.signals_done = time.perf_counter() - self.t0
        if outcome.ok:
            res: PrepareOutcome = outcome.value
            self.cached += res.from_cache
            if res.prepared.seconds is not None:  # cluster run: store them here
                res.cache_sha256 = store_cached(self.cache_file[i], res.cache_key,
                                                res.prepared)
                res.prepared.seconds = None
            if res.cache_sha256:
                self.outdir.record(self.cache_file[i], "cache", res.cache_sha256)
            self.prepared[i] = res.prepared
            self.moments[i] = res.moments
            if res.recording_sha256:
                self.input_sha256[self.recs[i].recording_path] = res.recording_sha256
        else:
            self._failed(i, "signals", outcome)
        self._signals_over(i)

    def _metrics_in(self, i: int, outcome: Outcome) -> None:
        self.bars[1].step()
        self.metrics_done = time.perf_counter() - (self.metrics_start or self.t0)
        if not outcome.ok:
            self._failed(i, "metrics", outcome)
            return
        fin: Finished = outcome.value
        self.finished[i] = fin
        # the session's codes are in its timeline now: keep what the study tables need
        self.inputs[i] = dataclasses.replace(self.inputs[i],
                                             codes=self.inputs[i].codes.iloc[:0])
        rel = f"timeline/{fin.key.stem()}.parquet"
        if fin.timeline is not None:  # cluster run: write it here
            self.outdir.parquet(rel, fin.timeline, "align")
            fin.timeline = None  # free the memory; the file holds it now
        else:
            self.outdir.record(self.outdir.path(rel), "align", fin.timeline_sha256)

    def _failed(self, i: int, stage: str, outcome: Outcome) -> None:
        key = self.recs[i].key
        self.failures.append({"participant_id": key.participant_id,
                              "session_id": key.session_id, "stage": stage,
                              "error": outcome.error, "hint": outcome.hint or ""})
        if not self.keep_going:
            raise StageError(outcome.error or "failed", unit=key.label(), stage=stage,
                             hint=(outcome.hint or "") + "; use --keep-going to run the "
                             "other sessions and list every failure")

    def close(self) -> None:
        """Drop the tasks not yet started; close the progress bars."""
        self.pool.cancel(self.pending)
        for bar in self.bars:
            bar.close()


def run_study(target: str | Path, out: str | Path, *, workers: int = 1,
              cluster: str | None = None, keep_going: bool = False, fresh: bool = False,
              quiet: bool = False, report: bool = True,
              log: Callable[[str], None] = print) -> RunResult:
    """Run the whole pipeline on a study folder or study .toml; write OUT."""
    started = time.perf_counter()
    folder, cfg, cfg_file = resolve_study(target)
    # Local workers are forked from the fork server, which imports the stage modules
    # while the runner reads the study; one pool serves every phase.
    with TaskPool(workers, cluster, preload=STAGE_MODULES) as pool:
        return _run(pool, folder, cfg, cfg_file, out, started=started, keep_going=keep_going,
                    fresh=fresh, quiet=quiet, report=report)


def _run(pool: TaskPool, folder: Path, cfg: Config, cfg_file: Path | None, out: str | Path, *,
         started: float, keep_going: bool, fresh: bool, quiet: bool, report: bool
         ) -> RunResult:
    # timings_s: how long each phase took. The phases overlap (the media log is read
    # while the signals run, and a participant's metrics start as soon as its
    # sessions have their signals), so they add up to more than total_s.
    timings: dict[str, float] = {}
    _arrow_threads(pool.workers if pool.local_files else 1)
    map_big_arrays()  # the study's big temporary arrays go back to the OS when freed
    head = read_study_head(folder, cfg)
    recs = recording_inputs(head)
    total = len(recs)
    outdir = OutputFolder(Path(out))
    work = Sessions(pool, recs, cfg, outdir, fresh=fresh, keep_going=keep_going,
                    quiet=quiet)
    if head.ok:  # else the problems are listed with the media log's, below
        work.queue_signals()
    try:
        study = read_study_rest(head, cfg)
        timings["ingest_s"] = time.perf_counter() - started
        multi_coded = _multi_coded(study)
        if multi_coded:
            from pipeline.agreement.tables import check_reserved_code

            check_reserved_code(study.media_log)
        all_coders: dict[int, pd.DataFrame] | None = {} if multi_coded else None
        inputs, coder_notes = session_inputs(study, cfg, recs, all_coders)
        # every row of the log the run uses is now in the sessions' inputs (copies):
        # the study's own copy can go
        study = dataclasses.replace(study, media_log=study.media_log.iloc[:0])
        return_freed_memory()  # ingest's temporary arrays
        if pool.runs_here:
            # Serial runs do the per-session work in this process: from here on keep
            # freed memory for the next session's arrays.
            keep_freed_memory()
        work.finish_with(inputs, all_coders)
        work.run()
    finally:
        work.close()
    timings["signals_s"], timings["metrics_s"] = work.signals_done, work.metrics_done
    prepared, finished, failures = work.prepared, work.finished, work.failures
    cached, input_sha256 = work.cached, work.input_sha256

    # -- phase 5: group tables
    ok = sorted(finished)
    qc = pd.DataFrame([_qc_row(inputs[i], prepared[i], finished[i], cfg) for i in ok])
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
    # The group analyses, then the writing of the session tables, run on the pool's
    # workers (on a local pool) while this process goes on.
    t0 = time.perf_counter()
    group = _start_group(pool, study, cfg, tables, finished, ok,
                         [prepared[i].methods for i in ok])
    # The tables' CSV text is made by the workers, a long table in blocks of rows on
    # each of them (float text is the slow part of a CSV: 77,000 SCRs take 0.4 s),
    # the longest first; this process joins the blocks and writes each file.
    blocks = {rel: row_blocks(df, pool.workers, CSV_BLOCK_ROWS) for rel, df in tables.items()}
    text_tasks = sorted(((rel, j, part) for rel, parts in blocks.items()
                         for j, part in enumerate(parts)), key=lambda t: -t[2][0].size)
    text_pending = {(rel, j): pool.submit(csv_bytes, part) for rel, j, part in text_tasks}

    summary = [f"ran {len(ok)} of {total} sessions"
               + (f" ({cached} from cache)" if cached else "")]
    methods: dict[str, dict] = {}
    summary += _describe(study, cfg, sessions, qc)
    if coder_notes:
        summary.append(f"{len(coder_notes)} session(s) coded by several coders; run uses one "
                       "coder per session (each is named in qc/sessions.csv; `screenweave "
                       "agree` compares them)")
    details = list(coder_notes)

    # -- models and group analyses
    analysis_lines = _collect_group(group, study, cfg, outdir, methods, finished, ok)
    details += analysis_lines
    summary += _headlines(analysis_lines)
    if analysis_lines:
        outdir.text("models/summary.txt", "\n".join(analysis_lines) + "\n", "models")
        summary.append("full model summary: models/summary.txt")
    timings["models_s"] = time.perf_counter() - t0
    for rel, parts in blocks.items():
        # a failed block is made again here, so that its error is raised with its details
        data = b"".join(out.value if out.ok else csv_bytes(part) for part, out in
                        zip(parts, (text_pending[(rel, j)].result()
                                    for j in range(len(parts)))))
        target = outdir.bytes(rel, data, rel.split("/")[0])
        outdir.record(target, rel.split("/")[0], hashlib.sha256(data).hexdigest())

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


@dataclass
class GroupWork:
    """The group analyses under way: each is a task on the pool (a worker on a local
    pool, so this process needs neither scipy nor statsmodels), with its arguments
    kept to run it again here should it fail (its error is then raised with its own
    type and details)."""

    tasks: dict[str, tuple[Callable, tuple, object]]

    def result(self, name: str):
        fn, args, pending = self.tasks[name]
        outcome = pending.result()
        return outcome.value if outcome.ok else fn(args)


def _start_group(pool: TaskPool, study: Study, cfg: Config, tables: dict[str, pd.DataFrame],
                 finished: dict[int, Finished], ok: list[int],
                 signal_methods: list[dict[str, str]]) -> GroupWork:
    """Start the cohort models, the switch-locked summary, the survey comparison and
    the signal methods text."""
    m = cfg.models
    parts = [finished[i].switch_locked for i in ok
             if finished[i].switch_locked is not None and len(finished[i].switch_locked)]
    work = {
        "models": (_compare_task, (tables["metrics/sessions.csv"], tables["metrics/states.csv"],
                                   tables["metrics/groups.csv"], study.roster, m, cfg.cohorts,
                                   cfg.qc.exclude_flagged_from_models)),
        "switch_locked": (_switch_locked_task,
                          (pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(),
                           study.roster, m, cfg.cohorts.reference)),
    }
    if study.survey is not None:
        work["survey"] = (_survey_task, (study.survey, study.roster, cfg))
    work["signal_methods"] = (_signal_methods, signal_methods)
    return GroupWork({name: (fn, args, pool.submit(fn, args))
                      for name, (fn, args) in work.items()})


def _collect_group(group: GroupWork, study: Study, cfg: Config, outdir: OutputFolder,
                   methods: dict, finished: dict[int, Finished], ok: list[int]) -> list[str]:
    """Write the group analyses' tables (coder agreement is done here meanwhile);
    return their summary lines."""
    methods["signals"] = group.result("signal_methods")
    agreement_lines = _agreement(study, cfg, outdir, methods, finished, ok)
    results = group.result("models")
    outdir.csv("models/comparisons.csv", results["comparisons"], "models")
    outdir.csv("models/variance_components.csv", results["variances"], "models")
    traj, test, locked_lines, locked_methods = group.result("switch_locked")
    outdir.csv("metrics/switch_locked.csv", traj, "metrics")
    outdir.csv("models/switch_locked_test.csv", test, "models")
    methods["models"] = results["methods"] | locked_methods
    if "agreement" in methods:  # keep the manifest's order: signals, models, agreement
        methods["agreement"] = methods.pop("agreement")
    if "survey" in group.tasks:
        table, survey_methods = group.result("survey")
        outdir.csv("models/survey.csv", table, "models")
        methods["models"].update(survey_methods)
    return results["summary"] + locked_lines + agreement_lines


def _compare_task(args: tuple) -> dict:
    """The cohort comparisons as one task (arguments as one tuple, for the pool). The
    :class:`~pipeline.models.ModelResults` come back as a plain dict, so that taking
    them in does not import the models package (and statsmodels) into the runner."""
    from pipeline.models import compare

    sessions, states, groups, roster, models_cfg, cohorts_cfg, exclude = args
    results = compare(sessions, states, groups, roster, models_cfg, cohorts_cfg,
                      exclude_unusable=exclude)
    return {"comparisons": results.comparisons, "variances": results.variances,
            "methods": dict(results.methods), "summary": list(results.summary)}


def _switch_locked_task(args: tuple) -> tuple[pd.DataFrame, pd.DataFrame, list[str], dict]:
    """Switch-locked arousal: the cohort trajectories, their test, the summary lines
    and the methods text, as one task."""
    from pipeline.metrics.switch_locked import switch_locked_methods, switch_locked_summary

    per_session, roster, m, reference = args
    traj, test, more = switch_locked_summary(
        per_session, roster, pre_s=m.switch_locked_pre_s, min_events=m.min_switch_events,
        confidence=m.confidence_level, reference=reference)
    return traj, test, more, switch_locked_methods(m.switch_locked_window_s,
                                                   m.switch_locked_pre_s)


def _survey_task(args: tuple) -> tuple[pd.DataFrame, dict]:
    """The survey comparison and its methods text, as one task."""
    from pipeline.models import compare_survey, survey_methods

    survey, roster, cfg = args
    m = cfg.models
    table = compare_survey(survey, roster, m.fdr_q, method=m.survey_method,
                           reference=cfg.cohorts.reference, items=cfg.survey.items or None,
                           min_participants=cfg.cohorts.min_participants,
                           fdr_method=m.fdr_method, confidence=m.confidence_level,
                           include=cfg.cohorts.include or None)
    return table, survey_methods(m.survey_method, m.fdr_method)


def _multi_coded(study: Study) -> bool:
    """True when some session of the media log is coded by two or more coders."""
    return any(run.several_coders for run in session_runs(study.media_log).values())


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
