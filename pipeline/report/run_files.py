"""Read a finished run folder (CONTRACT §3) into memory for the report.

The report is rebuilt from the run's own files only, so every number it shows can be
traced to a CSV the reader can open. Tables other than ``metrics/sessions.csv`` are
optional: a missing one leaves its chart out, with the reason, never a made-up value.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from pipeline.config import Config
from pipeline.errors import InputError

#: Table name -> path inside OUT.
TABLE_PATHS: dict[str, str] = {
    "sessions": "metrics/sessions.csv",
    "states": "metrics/states.csv",
    "platforms": "metrics/platforms.csv",
    "groups": "metrics/groups.csv",
    "bouts": "metrics/bouts.csv",
    "switches": "metrics/switches.csv",
    "switch_locked": "metrics/switch_locked.csv",
    "switch_locked_test": "models/switch_locked_test.csv",
    "comparisons": "models/comparisons.csv",
    "survey": "models/survey.csv",
    "qc": "qc/sessions.csv",
    "agreement": "agreement/sessions.csv",
    "power": "power/power.csv",
}

#: Other places a table may be found (first that exists wins): `screenweave power --out
#: OUT` writes OUT/power.csv.
ALTERNATE_PATHS: dict[str, tuple[str, ...]] = {"power": ("power.csv",)}

#: Columns a table must have for the report to use it (CONTRACT §3).
REQUIRED_COLUMNS: dict[str, tuple[str, ...]] = {
    "sessions": ("participant_id", "session_id", "cohort", "coded_hours", "media_hours",
                 "multi_hours", "switches", "switches_per_hour"),
    "states": ("participant_id", "session_id", "cohort", "state", "seconds",
               "arousal_p05", "arousal_p95", "arousal_range"),
    "platforms": ("participant_id", "session_id", "cohort", "platform", "group",
                  "in_view_seconds", "attended_seconds"),
    "comparisons": ("outcome", "model", "term", "estimate", "ci_low", "ci_high", "p_value",
                    "n_participants", "n_obs", "scale"),
    "agreement": ("participant_id", "session_id", "coder_a", "coder_b", "seconds_compared",
                  "kappa_attended", "kappa_state", "switch_f1"),
    "power": ("participants_per_cohort", "power", "ci_low", "ci_high"),
    "switch_locked": ("level", "lag_s", "arousal_switch_z", "switch_ci_low", "switch_ci_high",
                      "arousal_pseudo_z", "baseline_ci_low", "baseline_ci_high"),
}

#: Columns always read as text (IDs such as "007" must stay as typed).
TEXT_COLUMNS = frozenset({
    "participant_id", "session_id", "cohort", "state", "fine_state", "platform", "group",
    "outcome", "model", "term", "scale", "note", "coder", "coder_a", "coder_b", "flags",
    "from_platform", "to_platform", "item", "in_view", "attended", "reason", "method",
    "level", "scope", "reference", "direction", "censor_reason", "coder", "channels",
    "recording", "effect_measure",
})
BOOL_TEXT = {"true": True, "false": False, "1": True, "0": False, "yes": True, "no": False}


class Missing(Exception):
    """A table or column the report needs is absent; the message says which and why."""


def _read_table(path: Path) -> pd.DataFrame:
    """Read a run CSV: text columns as text, the rest numeric, booleans as booleans."""
    try:
        raw = pd.read_csv(path, dtype=str, keep_default_na=False)
    except pd.errors.EmptyDataError:
        return pd.DataFrame()
    except (pd.errors.ParserError, UnicodeDecodeError) as err:
        raise InputError(str(path), f"cannot be read as CSV ({err})",
                         hint="the run's tables are written by `screenweave run`; "
                              "rerun it if the file was edited") from None
    out = {}
    for col in raw.columns:
        text = raw[col]
        if col in TEXT_COLUMNS:
            out[col] = text
            continue
        lowered = text.str.strip().str.lower()
        nonempty = lowered[lowered != ""]
        if len(nonempty) and nonempty.isin(["true", "false"]).all():
            out[col] = lowered.map(BOOL_TEXT).astype("boolean")
            continue
        blank = text.isin(["", "nan", "NaN", "NA"])
        num = pd.to_numeric(text.where(~blank, None), errors="coerce")
        # a column with text that is not a number stays text
        bad = num.isna() & ~blank
        out[col] = text if bad.any() else num.astype(float)
    return pd.DataFrame(out, index=raw.index)


@dataclass
class RunFiles:
    """The files of one finished run, read once."""

    out_dir: Path
    manifest: dict
    config: dict
    tables: dict[str, pd.DataFrame]
    missing: dict[str, str] = field(default_factory=dict)
    timeline_files: dict[str, Path] = field(default_factory=dict)

    # ----------------------------------------------------------------- access
    def has(self, name: str) -> bool:
        return name in self.tables and not self.tables[name].empty

    def table(self, name: str, columns: tuple[str, ...] | list[str] = ()) -> pd.DataFrame:
        """The table, or :class:`Missing` saying which file or column is absent."""
        if name not in self.tables:
            raise Missing(self.missing.get(name, f"{TABLE_PATHS[name]} was not written"))
        df = self.tables[name]
        if df.empty:
            raise Missing(f"{TABLE_PATHS[name]} has no rows")
        absent = [c for c in columns if c not in df.columns]
        if absent:
            raise Missing(f"{TABLE_PATHS[name]} has no column {', '.join(map(repr, absent))}")
        return df

    def pick(self, name: str, *candidates: str) -> str:
        """The first of ``candidates`` that is a column of the table (else Missing)."""
        df = self.table(name)
        for c in candidates:
            if c in df.columns:
                return c
        raise Missing(f"{TABLE_PATHS[name]} has none of the columns "
                      f"{', '.join(map(repr, candidates))}")

    def timeline(self, stem: str) -> pd.DataFrame:
        path = self.timeline_files.get(stem)
        if path is None:
            raise Missing(f"timeline/{stem}.parquet was not written")
        return pd.read_parquet(path)

    # --------------------------------------------------------------- study facts
    @property
    def study_name(self) -> str:
        name = self.manifest.get("study")
        if isinstance(name, dict):
            name = name.get("name")
        return str(name or self.config.get("study", {}).get("name") or "Untitled study")

    @property
    def vocabulary(self) -> list[str]:
        """Platform codes in the order of ``[platforms.groups]`` (else none declared)."""
        platforms = self.config.get("platforms") or {}
        return [str(c) for c in (platforms.get("groups") or {})]

    @property
    def platform_groups(self) -> dict[str, str]:
        platforms = self.config.get("platforms") or {}
        groups = {str(k): str(v) for k, v in (platforms.get("groups") or {}).items()}
        if self.has("platforms"):
            seen = self.tables["platforms"][["platform", "group"]].drop_duplicates()
            for code, group in seen.itertuples(index=False):
                groups.setdefault(str(code), str(group))
        return groups

    @property
    def platform_labels(self) -> dict[str, str]:
        platforms = self.config.get("platforms") or {}
        return {str(k): str(v) for k, v in (platforms.get("labels") or {}).items()}

    @property
    def platforms_seen(self) -> list[str]:
        seen: set[str] = set()
        if self.has("platforms"):
            seen |= set(self.tables["platforms"]["platform"].astype(str))
        if self.has("bouts") and "platform" in self.tables["bouts"].columns:
            seen |= set(self.tables["bouts"]["platform"].astype(str))
        return sorted(seen)

    @property
    def cohorts(self) -> list[str]:
        """Cohorts, the reference (``[cohorts] reference`` or first sorted) first."""
        found = sorted(set(self.tables["sessions"]["cohort"].astype(str)))
        ref = (self.config.get("cohorts") or {}).get("reference")
        if ref in found:
            found.remove(ref)
            found.insert(0, ref)
        return found

    @property
    def reference_cohort(self) -> str:
        return self.cohorts[0] if self.cohorts else ""

    @property
    def methods(self) -> dict[str, dict[str, str]]:
        m = self.manifest.get("methods") or {}
        return {str(stage): {str(k): str(v) for k, v in (keys or {}).items()}
                for stage, keys in m.items()}


def _merge(base: dict, over: dict) -> dict:
    out = dict(base)
    for k, v in over.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = _merge(out[k], v)
        else:
            out[k] = v
    return out


def read_run(out_dir: Path) -> RunFiles:
    """Read a finished run folder; refuse one that is not a run with a clear message."""
    out_dir = Path(out_dir)
    if not out_dir.is_dir():
        raise InputError(str(out_dir), "is not a folder",
                         hint="give the --out folder of a finished `screenweave run`")
    manifest_path = out_dir / "manifest.json"
    if not manifest_path.is_file():
        raise InputError(str(manifest_path), "is missing, so this is not a finished run",
                         hint="run `screenweave run STUDY --out OUT` first, then "
                              "`screenweave report OUT`")
    try:
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as err:
        raise InputError(str(manifest_path), f"is not valid JSON ({err})",
                         hint="rerun `screenweave run` to write it again") from None
    if not isinstance(manifest, dict):
        raise InputError(str(manifest_path), "does not hold a JSON object",
                         hint="rerun `screenweave run` to write it again")
    config = _merge(Config().model_dump(mode="json"), manifest.get("config") or {})

    tables: dict[str, pd.DataFrame] = {}
    missing: dict[str, str] = {}
    for name, rel in TABLE_PATHS.items():
        path = out_dir / rel
        for alt in ALTERNATE_PATHS.get(name, ()):
            if not path.is_file() and (out_dir / alt).is_file():
                path, rel = out_dir / alt, alt
        if not path.is_file():
            missing[name] = f"{rel} was not written by this run"
            continue
        df = _read_table(path)
        need = [c for c in REQUIRED_COLUMNS.get(name, ()) if c not in df.columns]
        if need and not df.empty:
            missing[name] = f"{rel} lacks the column(s) {', '.join(need)}"
            continue
        tables[name] = df
    if "sessions" not in tables:
        raise InputError(str(out_dir / TABLE_PATHS["sessions"]),
                         missing.get("sessions", "has no rows"),
                         hint="the report needs the session metrics of a finished run")
    timeline_dir = out_dir / "timeline"
    timeline_files = ({p.stem: p for p in sorted(timeline_dir.glob("*.parquet"))}
                      if timeline_dir.is_dir() else {})
    return RunFiles(out_dir, manifest, config, tables, missing, timeline_files)
