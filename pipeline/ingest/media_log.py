"""The media log: which platforms were in view and attended, second by second.

Read from ``media_log.csv`` or from every ``media_log/*.csv`` (e.g. one file per
coder), each file in either form of CONTRACT §1:

* second-by-second: participant_id, session_id, second, in_view, attended[, coder];
* intervals: participant_id, session_id, platform, start_s, end_s, role[, coder] with
  role ``in_view`` or ``attended``, start inclusive, end exclusive. Intervals are turned
  into the second-by-second form first. Every second of the *coded span* of a session
  and coder, from its earliest ``start_s`` to its latest ``end_s``, is coded; a second
  of the span that no in_view interval covers has nothing in view. Seconds outside the
  span are uncoded.

A file without a ``coder`` column gets its file stem as coder when ``media_log/``
holds several files, else ''. The result has one row per coded second and coder, with
``in_view`` normalised to the sorted unique codes joined by ';'.

A study's log can hold millions of seconds but only a few distinct IDs, coders and
code combinations. Its text columns are therefore read and returned as pandas
categoricals (the same strings, each held once), every per-text check runs once per
distinct value, and ``second`` is a 32-bit integer.
"""

from __future__ import annotations

import dataclasses
import difflib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.errors import InputError, ProblemCollector
from pipeline.ingest.cells import distinct, non_negative_integers, pair_codes, report
from pipeline.ingest.csvfile import CsvTable, missing_columns, read_table
from pipeline.ingest.sessions import session_rows

KEYS = ["participant_id", "session_id"]
SECOND_FORM = ["participant_id", "session_id", "second", "in_view", "attended"]
INTERVAL_FORM = ["participant_id", "session_id", "platform", "start_s", "end_s", "role"]
ROLES = ("in_view", "attended")
COLUMNS = ["participant_id", "session_id", "second", "in_view", "attended", "coder"]
#: The text columns of the log, held as categoricals.
TEXT_COLUMNS = ["participant_id", "session_id", "in_view", "attended", "coder"]
#: Order of the log's rows.
ORDER = ["participant_id", "session_id", "coder", "second"]
#: Characters a platform code may not hold: ';' separates codes, '+' joins the fine state.
RESERVED = (";", "+")


@dataclass
class Vocabulary:
    """The platform codes allowed (None: every code is allowed and collected)."""

    declared: set[str] | None
    seen: set[str] = field(default_factory=set)

    def unknown(self, codes: list[str]) -> list[str]:
        if self.declared is None:
            return []
        return [c for c in codes if c not in self.declared]

    def hint(self, code: str) -> str:
        allowed = sorted(self.declared or [])
        close = difflib.get_close_matches(code, allowed, n=1)
        text = f"did you mean {close[0]!r}? " if close else ""
        return text + (f"declared codes: {', '.join(allowed)}; add new codes to "
                       "[platforms.groups] in study.toml")


@dataclass
class LogPart:
    """One file's rows in second-by-second form, with where each row came from."""

    frame: pd.DataFrame  # COLUMNS
    label: str
    lines: np.ndarray  # line of each row, -1 where none (span seconds of interval form)


# ------------------------------------------------------------------------- files
def media_log_files(root: Path, warnings: list[str]) -> list[tuple[Path, str]]:
    """The media log file(s) of a study as (path, label), in sorted order."""
    single = root / "media_log.csv"
    folder = root / "media_log"
    if single.is_file() and folder.is_dir():
        raise InputError("media_log.csv", "and a media_log/ folder both exist",
                         hint="keep either one media_log.csv or the files in media_log/")
    if single.is_file():
        return [(single, "media_log.csv")]
    if folder.is_dir():
        files, ignored = [], []
        for path in sorted(folder.iterdir()):
            if path.name.startswith("."):
                continue
            if path.is_file() and path.suffix.lower() == ".csv":
                files.append((path, f"media_log/{path.name}"))
            else:
                ignored.append(path.name)
        if ignored:
            warnings.append(f"media_log/: ignored (not .csv files): {', '.join(ignored)}")
        if not files:
            raise InputError("media_log/", "holds no .csv file",
                             hint="put the media log as media_log.csv or media_log/*.csv")
        return files
    raise InputError("media_log.csv", "is missing (no media_log.csv and no media_log/ folder)",
                     hint="the study folder needs the second-by-second or interval media log")


# ------------------------------------------------------------------- shared checks
def _session_rows(table: CsvTable, sessions: pd.DataFrame,
                  problems: ProblemCollector) -> tuple[np.ndarray, np.ndarray]:
    """Position of each row's session in ``sessions`` (-1 if none) and its duration."""
    pos = session_rows(table, sessions, problems, "media log")
    # a row of no session (pos -1) takes the appended 0
    durations = np.append(sessions["duration_s"].to_numpy(dtype=np.int64), 0)
    duration = _compact_seconds(durations)[pos]
    return pos, duration


def _categorical(codes: np.ndarray, values: list[str] | np.ndarray) -> pd.Categorical:
    """The categorical of ``values[codes]`` (``values`` may repeat: equal ones merge)."""
    remap, merged = pd.factorize(np.asarray(values, dtype=object))
    return pd.Categorical.from_codes(remap.astype(np.int32)[codes] if len(codes) else codes,
                                     pd.Index(merged, dtype=object))


def _coders(table: CsvTable, fallback: str) -> pd.Series:
    """Each row's coder: the coder column, or ``fallback`` where it is empty or absent."""
    frame = table.frame
    categorical = isinstance(frame["participant_id"].dtype, pd.CategoricalDtype)
    if "coder" not in table.columns:
        if not categorical:
            return pd.Series(fallback, index=frame.index, dtype=object)
        return pd.Series(_categorical(np.zeros(len(frame), dtype=np.int8), [fallback]),
                         index=frame.index)
    coder = frame["coder"]
    if not isinstance(coder.dtype, pd.CategoricalDtype):
        return coder.where(coder != "", fallback)
    named = [fallback if c == "" else c for c in coder.cat.categories]
    return pd.Series(_categorical(coder.cat.codes.to_numpy(), named), index=frame.index)


def _split_codes(cell: str) -> list[str]:
    return sorted({part.strip() for part in cell.split(";")} - {""})


# ------------------------------------------------------------ second-by-second form
def _second_form(table: CsvTable, sessions: pd.DataFrame, vocab: Vocabulary, coder: str,
                 problems: ProblemCollector) -> LogPart:
    frame = table.frame
    if "attended" not in table.columns:
        problems.add(table.label, "has no column 'attended' (required for the second-by-second "
                     f"form: {', '.join(SECOND_FORM)})", line=table.header_line,
                     column="attended",
                     hint="add an attended column; leave it empty where nothing was attended")
        return LogPart(pd.DataFrame(columns=COLUMNS), table.label, np.zeros(0, np.int64))
    pos, duration = _session_rows(table, sessions, problems)
    ok = pos >= 0
    second, good_second = non_negative_integers(table, "second", problems, "second")
    late = ok & good_second & (second >= duration)
    for row in np.flatnonzero(late):
        problems.add(table.label, f"is past the session's end (the session lasts "
                     f"{duration[row]} s, so seconds run 0 to {duration[row] - 1})",
                     line=int(table.lines[row]), column="second", value=frame["second"].iloc[row],
                     hint="second counts from the session start; check start/end in "
                     "sessions.csv")
    ok &= good_second & ~late
    del pos, duration, late, good_second  # 2 million rows' worth each: free them early

    # in_view: normalise each distinct cell once, then map back to rows
    inverse, uniq = distinct(frame["in_view"])
    norm, reserved, unknown = [], [], []
    for cell in uniq:
        codes = _split_codes(cell)
        norm.append(";".join(codes))
        reserved.append([c for c in codes if "+" in c or c.lower() == "none"])
        unknown.append(vocab.unknown(codes))
        vocab.seen.update(codes)
    in_view = pd.Series(_categorical(inverse, norm), index=frame.index)
    bad_codes = np.zeros(len(table), dtype=bool)
    bad = [u for u in range(len(uniq)) if reserved[u] or unknown[u]]
    first_row = {u: np.argmax(inverse == u) for u in bad}
    for u in sorted(bad, key=first_row.get):  # in the order the cells first appear
        rows = inverse == u
        bad_codes |= rows
        if reserved[u]:
            report(table, "in_view", rows, problems,
                   f"holds code {reserved[u][0]!r}, which is reserved ('+' joins codes in the "
                   "fine state; 'none' names the state with nothing in view)",
                   hint="rename the platform code (e.g. 'tv_phone', 'no_device')")
        else:
            report(table, "in_view", rows, problems,
                   f"holds code {unknown[u][0]!r}, which is not in the [platforms] vocabulary",
                   hint=vocab.hint(unknown[u][0]))
    ok &= ~bad_codes

    # attended: one code, one of in_view; each distinct (in_view, attended) checked once
    attended = frame["attended"]
    pinverse, upairs = pair_codes(in_view, attended)
    fine, several, not_in_view = 0, 1, 2
    verdict = []
    for view, att in upairs:
        if att == "":
            verdict.append(fine)
        elif ";" in att:
            verdict.append(several)
        elif att not in view.split(";"):
            verdict.append(not_in_view)
        else:
            verdict.append(fine)
    verdict_rows = np.asarray(verdict, dtype=np.int8)[pinverse] if len(upairs) else \
        np.zeros(0, np.int8)
    report(table, "attended", verdict_rows == several, problems,
           "names more than one platform: attended is the one platform looked at",
           hint="keep one code in attended; the others belong in in_view")
    for row in np.flatnonzero(verdict_rows == not_in_view):
        view = in_view.iloc[row] or "nothing"
        problems.add(table.label, f"is not one of the platforms in view ({view})",
                     line=int(table.lines[row]), column="attended",
                     value=attended.iloc[row],
                     hint="attended must be empty or one of in_view")
    ok &= verdict_rows == fine
    del verdict_rows, pinverse, bad_codes

    out = pd.DataFrame({
        "participant_id": frame["participant_id"],
        "session_id": frame["session_id"],
        "second": second,
        "in_view": in_view,
        "attended": attended,
        "coder": _coders(table, coder),
    })
    if ok.all():  # the usual case: no copy of the whole log
        return LogPart(out, table.label, table.lines)
    return LogPart(out[ok].reset_index(drop=True), table.label, table.lines[ok])


# --------------------------------------------------------------------- interval form
def _expand(starts: np.ndarray, ends: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For intervals [start, end): (interval index of each second, the second)."""
    lengths = (ends - starts).astype(np.int64)
    which = np.repeat(np.arange(len(starts)), lengths)
    offsets = np.repeat(np.cumsum(lengths) - lengths, lengths)
    seconds = starts[which] + (np.arange(lengths.sum()) - offsets)
    return which, seconds.astype(np.int64)


def _combinations_text(on: np.ndarray, codes: list[str]) -> np.ndarray:
    """Row-wise text of a (seconds x codes) boolean matrix: the codes set, ';'-joined.

    Each distinct combination is turned into text once (codes are few, seconds many).
    """
    if len(codes) <= 62:
        key = np.zeros(len(on), dtype=np.int64)
        for i in range(len(codes)):
            key |= on[:, i].astype(np.int64) << i
        combo_of, combos = pd.factorize(key)
        rows = [[(int(k) >> i) & 1 for i in range(len(codes))] for k in combos]
    else:
        uniq, combo_of = np.unique(on, axis=0, return_inverse=True)
        rows = uniq.tolist()
    text = np.asarray([";".join(c for c, bit in zip(codes, row) if bit) for row in rows],
                      dtype=object)
    return text[np.asarray(combo_of).reshape(-1)] if len(text) else np.zeros(0, dtype=object)


def _interval_form(table: CsvTable, sessions: pd.DataFrame, vocab: Vocabulary, coder: str,
                   problems: ProblemCollector) -> LogPart:
    # Intervals are few (one row covers many seconds): plain text columns keep the
    # grouping below simple.
    table = dataclasses.replace(table, frame=table.frame.astype(object))
    frame = table.frame
    pos, duration = _session_rows(table, sessions, problems)
    ok = pos >= 0
    start, good_start = non_negative_integers(table, "start_s", problems, "start_s")
    end, good_end = non_negative_integers(table, "end_s", problems, "end_s")
    timed = good_start & good_end
    backwards = timed & (end <= start)
    report(table, "end_s", backwards, problems,
           "is not after start_s: an interval covers start_s up to, not including, end_s",
           hint="end_s must be larger than start_s (a one-second interval is 5,6)")
    late = ok & timed & ~backwards & (end > duration)
    for row in np.flatnonzero(late):
        problems.add(table.label, f"is past the session's end (the session lasts "
                     f"{duration[row]} s, so end_s is at most {duration[row]})",
                     line=int(table.lines[row]), column="end_s", value=frame["end_s"].iloc[row],
                     hint="start_s and end_s count from the session start; check start/end "
                     "in sessions.csv")
    ok &= timed & ~backwards & ~late
    role = frame["role"]
    bad_role = ~role.isin(ROLES).to_numpy()
    report(table, "role", bad_role, problems, "is not a role of the interval form",
           hint="role is in_view or attended")
    ok &= ~bad_role
    platform = frame["platform"]
    empty = (platform == "").to_numpy()
    report(table, "platform", empty, problems, "is empty: every interval names one platform")
    reserved = (platform.str.contains(r"[;+]", regex=True)
                | (platform.str.lower() == "none")).to_numpy()
    report(table, "platform", reserved, problems,
           "is reserved: an interval names one platform code, ';' and '+' join codes and "
           "'none' names the state with nothing in view",
           hint="one row per platform; rename codes holding '+' or named 'none'")
    unknown_codes = set(vocab.unknown(sorted(set(platform[~empty & ~reserved]))))
    unknown = platform.isin(unknown_codes).to_numpy()
    for row in np.flatnonzero(unknown):
        code = platform.iloc[row]
        problems.add(table.label, "is not in the [platforms] vocabulary",
                     line=int(table.lines[row]), column="platform", value=code,
                     hint=vocab.hint(code))
    ok &= ~empty & ~reserved & ~unknown
    vocab.seen.update(set(platform[ok]))

    iv = pd.DataFrame({
        "participant_id": frame["participant_id"], "session_id": frame["session_id"],
        "coder": _coders(table, coder), "platform": platform, "role": role,
        "start": start, "end": end, "line": table.lines,
    })[ok].reset_index(drop=True)
    if iv.empty:
        return LogPart(pd.DataFrame(columns=COLUMNS), table.label, np.zeros(0, np.int64))

    span_keys = ["participant_id", "session_id", "coder"]
    grouped = iv.groupby(span_keys, sort=True)
    span_id = grouped.ngroup().to_numpy()
    spans = grouped.agg(lo=("start", "min"), hi=("end", "max")).reset_index()
    lo, hi = spans["lo"].to_numpy(), spans["hi"].to_numpy()
    which_span, base_second = _expand(lo, hi)
    span_offset = np.cumsum(hi - lo) - (hi - lo)
    n_base = len(base_second)

    codes = sorted(iv["platform"].unique())
    code_of = {c: i for i, c in enumerate(codes)}
    code_idx = iv["platform"].map(code_of).to_numpy()
    istart, iend = iv["start"].to_numpy(), iv["end"].to_numpy()
    line_of = np.full(n_base, -1, dtype=np.int64)

    # in view: one boolean per (second, code), then each distinct combination to text
    view = iv["role"].to_numpy() == "in_view"
    which, sec = _expand(istart[view], iend[view])
    rows_v = np.flatnonzero(view)[which]
    base_row = span_offset[span_id[rows_v]] + sec - lo[span_id[rows_v]]
    in_view = np.zeros((n_base, len(codes)), dtype=bool)
    in_view[base_row, code_idx[rows_v]] = True
    line_of[base_row] = iv["line"].to_numpy()[rows_v]
    in_view_text = _combinations_text(in_view, codes)

    # attended: at most one platform per second, and that platform in view
    att = ~view
    which, sec = _expand(istart[att], iend[att])
    rows_a = np.flatnonzero(att)[which]
    base_a = span_offset[span_id[rows_a]] + sec - lo[span_id[rows_a]]
    cells = pd.DataFrame({"base": base_a, "code": code_idx[rows_a], "row": rows_a,
                          "second": sec}).drop_duplicates(["base", "code"])
    clash = cells[cells.duplicated("base", keep=False)].sort_values(["base", "row"])
    by_base = clash.groupby("base", sort=True)
    pairs = pd.DataFrame({"first": by_base["row"].nth(0).to_numpy(),
                          "other": by_base["row"].nth(1).to_numpy(),
                          "second": by_base["second"].first().to_numpy()})
    for first, other, second in pairs.drop_duplicates(["first", "other"]).itertuples(
            index=False):
        problems.add(table.label, f"is attended at second {int(second)} while "
                     f"{iv['platform'].iloc[other]!r} (line {int(iv['line'].iloc[other])}) is "
                     "attended too: one platform is attended at a time",
                     line=int(iv["line"].iloc[first]), column="platform",
                     value=iv["platform"].iloc[first],
                     hint="attended intervals of different platforms may not overlap")
    not_seen = ~in_view[cells["base"].to_numpy(), cells["code"].to_numpy()]
    for row, group in cells[not_seen].groupby("row", sort=True):
        problems.add(table.label, f"is attended from second {int(group['second'].min())} but not "
                     "in view then: no in_view interval of this platform covers it",
                     line=int(iv["line"].iloc[row]), column="platform",
                     value=iv["platform"].iloc[row],
                     hint="every attended second must also lie in an in_view interval of the "
                     "same platform")
    attended = np.full(n_base, "", dtype=object)
    attended[cells["base"].to_numpy()] = iv["platform"].to_numpy()[cells["row"].to_numpy()]

    out = pd.DataFrame({
        "participant_id": spans["participant_id"].to_numpy()[which_span],
        "session_id": spans["session_id"].to_numpy()[which_span],
        "second": base_second,
        "in_view": in_view_text,
        "attended": attended,
        "coder": spans["coder"].to_numpy()[which_span],
    })
    return LogPart(out, table.label, line_of)


# --------------------------------------------------------------------------- whole log
FORMS = {"second-by-second": SECOND_FORM, "interval": INTERVAL_FORM}


def _form_of(table: CsvTable, problems: ProblemCollector) -> str | None:
    cols = set(table.columns)
    second_cols = {"second", "in_view"} & cols
    interval_cols = {"platform", "start_s", "end_s", "role"} & cols
    if second_cols and interval_cols:
        problems.add(table.label, "mixes the columns of both media log forms "
                     f"({', '.join(sorted(second_cols | interval_cols))})",
                     line=table.header_line,
                     hint=f"use either {', '.join(SECOND_FORM)} or {', '.join(INTERVAL_FORM)}")
        return None
    form = "interval" if interval_cols else "second-by-second"
    required = [c for c in FORMS[form] if c != "attended"]
    before = len(problems.problems)
    missing_columns(table.label, table.columns, required, table.header_line, problems,
                    form=f"the {form} form")
    if len(problems.problems) > before:
        if not (second_cols or interval_cols):
            problems.add(table.label, "is in neither media log form", line=table.header_line,
                         hint=f"second-by-second: {', '.join(SECOND_FORM)}; intervals: "
                         f"{', '.join(INTERVAL_FORM)}")
        return None
    return form


def _duplicates(parts: list[LogPart], problems: ProblemCollector) -> None:
    """Report every (participant, session, second, coder) coded again, naming the first."""
    keys = ["participant_id", "session_id", "second", "coder"]
    frames = []
    for i, part in enumerate(parts):
        f = part.frame[keys].astype({k: object for k in keys if k != "second"})
        f["part"], f["line"] = i, part.lines
        frames.append(f)
    every = pd.concat(frames, ignore_index=True)
    dup = every.duplicated(keys, keep=False)
    if not dup.any():
        return
    d = every[dup]
    first = d.groupby(keys, sort=False)[["part", "line"]].transform("first")
    later = d.duplicated(keys, keep="first").to_numpy()
    d, first = d[later], first[later]
    labels = [p.label for p in parts]
    for pid, sid, second, coder, part, line, fpart, fline in zip(
            d["participant_id"], d["session_id"], d["second"], d["coder"], d["part"],
            d["line"], first["part"], first["line"]):
        where = f"line {fline}" if fline >= 0 else "an interval span"
        if fpart != part:
            where += f" of {labels[fpart]}"
        who = f" by coder {coder!r}" if coder else ""
        problems.add(labels[part], f"codes second {second} of session {pid}/{sid}{who} again "
                     f"(already coded on {where})", line=int(line) if line >= 0 else None,
                     column="second", value=second,
                     hint="each (participant, session, second, coder) is coded once")


def _shared_categories(frames: list[pd.DataFrame]) -> None:
    """Give each text column of ``frames`` the same sorted categories, in place.

    Shared categories let ``pd.concat`` keep the columns categorical; sorted ones make
    the log sort as its strings do. Categories are the values present, no others.
    """
    for column in TEXT_COLUMNS:
        cols = [distinct(f[column]) for f in frames]
        present = set()
        for codes, values in cols:
            present.update(values[np.bincount(codes, minlength=len(values)) > 0])
        categories = pd.Index(sorted(present), dtype=object)
        for f, (codes, values) in zip(frames, cols):
            position = categories.get_indexer(values)  # -1 for values no row holds
            f[column] = pd.Categorical.from_codes(position[codes] if len(codes) else codes,
                                                  categories)


def _sort_key(log: pd.DataFrame) -> np.ndarray | None:
    """One int64 per row that orders rows as :data:`ORDER` does (None if it would overflow).

    Equal keys mean the same participant, session, coder and second.
    """
    columns, sizes = [], []
    for column in ORDER:
        if column == "second":
            values = log[column].to_numpy()
            sizes.append(int(values.max()) + 1 if len(values) else 1)
        else:
            values = log[column].cat.codes.to_numpy()
            sizes.append(len(log[column].cat.categories))
        columns.append(values)
    if np.prod([float(n) for n in sizes]) >= 2**62:
        return None
    # Horner's scheme in place: key = ((p * n_s + s) * n_c + c) * n_sec + second, with no
    # temporary array of every row
    key = columns[0].astype(np.int64)
    for values, size in zip(columns[1:], sizes[1:]):
        key *= size
        np.add(key, values, out=key, casting="unsafe")
    return key


@dataclass
class SessionRun:
    """The rows of one session in a log sorted by :data:`ORDER`: ``rows`` (a slice), and
    whether two or more coders coded it."""

    rows: slice
    several_coders: bool


def session_runs(log: pd.DataFrame) -> dict[tuple[str, str], SessionRun]:
    """Each (participant_id, session_id) of a log as :func:`read_media_log` returns it
    (sorted by :data:`ORDER`, so each session's rows are one run), found from where
    the ID codes change: no hashing or index arrays of every row, as a group-by needs.
    """
    n = len(log)
    if not n:
        return {}
    p, s, c = (log[k].cat.codes.to_numpy() for k in ("participant_id", "session_id", "coder"))
    new_session = (p[1:] != p[:-1]) | (s[1:] != s[:-1])
    starts = np.concatenate([[0], np.flatnonzero(new_session) + 1])
    ends = np.append(starts[1:], n)
    del new_session
    pids, sids = log["participant_id"].cat.categories, log["session_id"].cat.categories
    runs = {(pids[p[a]], sids[s[a]]): SessionRun(slice(int(a), int(b)), bool(c[a] != c[b - 1]))
            for a, b in zip(starts, ends)}
    if len(runs) < len(starts):  # only if the log were not sorted: a bug, not user input
        raise RuntimeError("session_runs needs the media log sorted by participant and "
                           "session, as read_media_log returns it")
    return runs


def _empty_log() -> pd.DataFrame:
    text = pd.Categorical([], categories=pd.Index([], dtype=object))
    return pd.DataFrame({c: np.zeros(0, dtype=np.int32) if c == "second" else text
                         for c in COLUMNS})


def _compact_seconds(seconds: pd.Series | np.ndarray) -> np.ndarray:
    """Seconds as int32 (half the memory of int64) unless one does not fit (68 years)."""
    values = np.asarray(seconds)
    fits = not len(values) or int(values.max()) < np.iinfo(np.int32).max
    return values.astype(np.int32 if fits else np.int64)


def read_media_log(root: Path, sessions: pd.DataFrame, declared: set[str] | None,
                   problems: ProblemCollector,
                   warnings: list[str]) -> tuple[pd.DataFrame, set[str], list[Path]]:
    """Read and check every media log file of the study.

    Returns (the log in second-by-second form with columns :data:`COLUMNS`, the codes
    seen, the files read). Problems of every file are added to ``problems``. The log's
    rows are sorted by :data:`ORDER`; its text columns are categoricals whose
    categories are the sorted values present ('' stays '': nothing in view, nothing
    attended, no coder named), and ``second`` is int32.
    """
    files = media_log_files(root, warnings)
    several = len(files) > 1
    vocab = Vocabulary(declared)
    parts: list[LogPart] = []
    for path, label in files:
        try:
            table = read_table(path, label, KEYS, categorical=True)
        except InputError as err:
            problems.extend(err.problems)
            continue
        form = _form_of(table, problems)
        if form is None:
            continue
        coder = path.stem if several else ""
        if form == "interval":
            parts.append(_interval_form(table, sessions, vocab, coder, problems))
        else:
            parts.append(_second_form(table, sessions, vocab, coder, problems))
        del table
    parts = [p for p in parts if len(p.frame)]
    if not parts:
        return _empty_log(), vocab.seen, [path for path, _ in files]
    _shared_categories([p.frame for p in parts])
    if len(parts) == 1 and list(parts[0].frame.columns) == COLUMNS:
        log = parts[0].frame.copy(deep=False)  # one file: its rows are not copied
    else:
        log = pd.concat([p.frame[COLUMNS] for p in parts], ignore_index=True)
    log["second"] = _compact_seconds(log["second"])
    key = _sort_key(log)
    if key is None:  # more distinct keys than an int64 holds: let pandas do it
        _duplicates(parts, problems)
        log = log.sort_values(ORDER, kind="stable")
    else:
        ascending = bool((key[1:] >= key[:-1]).all())  # logs are usually written in order
        order = None if ascending else np.argsort(key, kind="stable")
        ordered = key if order is None else key[order]
        if (ordered[1:] == ordered[:-1]).any():
            _duplicates(parts, problems)
        del key, ordered
        if order is not None:
            log = log.take(order)
    if not log.index.equals(pd.RangeIndex(len(log))):
        log = log.reset_index(drop=True)
    return log, vocab.seen, [path for path, _ in files]
