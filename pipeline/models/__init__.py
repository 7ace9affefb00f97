"""models stage: cohort comparisons with participants as the unit.

Entry point of the runner::

    results = compare(sessions, states, groups, roster, cfg.models, cfg.cohorts,
                      exclude_unusable=cfg.qc.exclude_flagged_from_models)
    results.comparisons  -> OUT/models/comparisons.csv
    results.summary      -> readable lines (effects back-transformed, guard messages)
    results.methods      -> method key -> text with references, for the methods section
    results.variances    -> OUT/models/variance_components.csv (participant and residual
                            variance per mixed model, the count model's correlation)

* Session outcomes (``[models] session_outcomes``): ``outcome ~ cohort (+ covariates)``
  with a random intercept per participant, REML; log-scale outcomes give ratios.
* State outcomes (``[models] state_outcomes``): ``outcome ~ cohort * state
  (+ covariates)`` with a random intercept per participant; the interaction term says
  whether the multi - single difference differs between cohorts.
* Switch counts also through a GEE count model (``[models] count_method``) with a
  log(multi_hours) offset, as a check; the summary says where the two disagree.
* Benjamini-Hochberg (``[models] fdr_method``) across the cohort terms of the mixed
  models (the count check asks the same question again and is left out of the family).

Also here: :func:`compare_survey` (models/survey.csv) and, in
:mod:`pipeline.metrics.switch_locked`, the switch-locked arousal trajectories.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from pipeline.config import CohortSettings, ModelSettings
from pipeline.errors import choose, ConfigError
from pipeline.models.counts import COUNT_REFERENCES, count_method
from pipeline.models.design import cohort_design, is_cohort_term
from pipeline.models.fdr import FDR_METHODS, FDR_REFERENCES, adjust_p
from pipeline.models.guards import CohortPlan, plan_cohorts, too_few_participants
from pipeline.models.mixed import DF_METHODS, DF_REFERENCES, MIXED_FITTER_REFERENCES, \
    MIXED_FITTERS, FitResult, fit_mixed
from pipeline.models.summary import disagreement, row_sentence
from pipeline.models.survey import SURVEY_METHODS, compare_survey, survey_methods
from pipeline.types import STATES

__all__ = ["COMPARISON_COLUMNS", "ModelResults", "compare", "compare_survey",
           "model_session_outcome", "switch_rate_model", "fit_mixed", "survey_methods"]

#: Columns of models/comparisons.csv: CONTRACT §3, then the additions.
COMPARISON_COLUMNS = ["outcome", "model", "term", "estimate", "std_error", "ci_low",
                      "ci_high", "p_value", "p_fdr", "n_participants", "n_obs", "scale",
                      "converged", "note", "df"]

#: Columns of ModelResults.variances (models/variance_components.csv).
VARIANCE_COLUMNS = ["outcome", "model", "component", "estimate", "scale", "n_participants",
                    "n_obs", "converged"]

MIXED = "mixed_reml"


@dataclass
class ModelResults:
    """What the models stage hands the runner and the report."""

    comparisons: pd.DataFrame
    summary: list[str]
    methods: dict[str, str] = field(default_factory=dict)
    #: variance components of each mixed model (participant and residual variance, the
    #: participant share) and the count model's working correlation; one row each
    variances: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(
        columns=VARIANCE_COLUMNS))


@dataclass
class _Context:
    plan: CohortPlan
    covariates: list[str]
    models: ModelSettings
    cohorts: CohortSettings
    summary: list[str] = field(default_factory=list)
    checks: list[str] = field(default_factory=list)
    variances: list[pd.DataFrame] = field(default_factory=list)
    optimisers: set[str] = field(default_factory=set)
    offset_used: bool = False


# --------------------------------------------------------------------- rows
def _fit_rows(outcome: str, model: str, fit: FitResult, scale: str,
              extra_notes: list[str]) -> pd.DataFrame:
    notes = [*extra_notes, *fit.notes]
    t = fit.terms.copy()
    t["outcome"] = outcome
    t["model"] = model
    t["p_fdr"] = np.nan
    t["n_participants"] = fit.n_groups
    t["n_obs"] = fit.n_obs
    t["scale"] = scale
    t["converged"] = bool(fit.converged)
    t["note"] = "; ".join(notes)
    return t[COMPARISON_COLUMNS]


def _variance_rows(outcome: str, model: str, fit: FitResult, scale: str) -> pd.DataFrame:
    """Variance components (mixed model) or the working correlation (GEE) of one fit."""
    if not fit.fitted:
        return pd.DataFrame(columns=VARIANCE_COLUMNS)
    v = fit.variances
    if "participant" in v:
        total = v["participant"] + v["residual"]
        rows = [("participant_variance", v["participant"]), ("residual_variance", v["residual"]),
                ("participant_share", v["participant"] / total if total > 0 else np.nan)]
    else:
        rows = [(k, val) for k, val in v.items()]
    return pd.DataFrame({"outcome": outcome, "model": model,
                         "component": [r[0] for r in rows],
                         "estimate": [float(r[1]) for r in rows], "scale": scale,
                         "n_participants": fit.n_groups, "n_obs": fit.n_obs,
                         "converged": bool(fit.converged)})[VARIANCE_COLUMNS]


def _skipped_row(outcome: str, model: str, scale: str, note: str, data: pd.DataFrame | None
                 ) -> pd.DataFrame:
    n_p = int(data["participant_id"].nunique()) if data is not None and len(data) else 0
    n_o = int(len(data)) if data is not None else 0
    row = {c: np.nan for c in COMPARISON_COLUMNS}
    row.update(outcome=outcome, model=model, term="cohort", n_participants=n_p, n_obs=n_o,
               scale=scale, converged=False, note=note)
    return pd.DataFrame([row])[COMPARISON_COLUMNS]


# ------------------------------------------------------------------ inputs
def _as_bool(col: pd.Series) -> pd.Series:
    if pd.api.types.is_bool_dtype(col):
        return col.fillna(False).astype(bool)
    text = col.astype(str).str.strip().str.lower()
    return text.isin(["true", "1", "yes", "1.0"])


def _attach(table: pd.DataFrame, roster: pd.DataFrame, covariates: list[str]) -> pd.DataFrame:
    """The table with ``cohort`` (from the roster where missing) and the covariates."""
    t = table.copy()
    t["participant_id"] = t["participant_id"].astype(str)
    r = roster.copy()
    r["participant_id"] = r["participant_id"].astype(str)
    wanted = [c for c in covariates if c not in t.columns]
    if "cohort" not in t.columns:
        wanted = ["cohort", *wanted]
    if wanted:
        t = t.merge(r[["participant_id", *wanted]], on="participant_id", how="left")
    t["cohort"] = t["cohort"].astype(str)
    return t


def _drop_unusable(sessions: pd.DataFrame, others: list[pd.DataFrame], exclude: bool,
                   lines: list[str]) -> tuple[pd.DataFrame, list[pd.DataFrame]]:
    if not exclude:
        return sessions, others
    if "usable" not in sessions.columns:
        lines.append("models: metrics/sessions.csv has no usable column, so no session is "
                     "left out for quality control")
        return sessions, others
    usable = _as_bool(sessions["usable"])
    bad = sessions.loc[~usable, ["participant_id", "session_id"]].astype(str)
    if bad.empty:
        return sessions, others
    lines.append(f"models: {len(bad)} session(s) flagged unusable by quality control left "
                 "out of every model ([qc] exclude_flagged_from_models)")
    keys = set(map(tuple, bad.to_numpy()))

    def keep(t: pd.DataFrame) -> pd.DataFrame:
        k = list(zip(t["participant_id"].astype(str), t["session_id"].astype(str)))
        return t[[x not in keys for x in k]]

    return sessions[usable.to_numpy()], [keep(t) for t in others]


def _check_settings(models: ModelSettings, roster: pd.DataFrame) -> None:
    for key, registry, value in (("fdr_method", FDR_METHODS, models.fdr_method),
                                 ("df_method", DF_METHODS, models.df_method),
                                 ("mixed_fitter", MIXED_FITTERS, models.mixed_fitter),
                                 ("survey_method", SURVEY_METHODS, models.survey_method)):
        choose(registry, value, f"[models] {key}")
    count_method(models.count_method)
    missing = [c for c in models.covariates if c not in roster.columns]
    if missing:
        extra = [c for c in roster.columns if c not in ("participant_id", "cohort")]
        raise ConfigError(f"[models] covariates names {', '.join(map(repr, missing))}, not a "
                          "column of roster.csv",
                          hint=f"roster covariates: {', '.join(extra) or '(none)'}")
    bad = [c for c in models.covariates if c in ("participant_id", "cohort")]
    if bad:
        raise ConfigError(f"[models] covariates cannot include {', '.join(bad)}",
                          hint="cohort is always in the model; participant is the random "
                          "effect")
    unknown = [s for s in models.states if s not in STATES]
    if unknown or len(models.states) < 2 or len(set(models.states)) != len(models.states):
        raise ConfigError(f"[models] states = {models.states!r}: needs two or more distinct "
                          "states",
                          hint=f"states are {', '.join(STATES)}; the first is the reference")


# ---------------------------------------------------------------- one model
def _with_covariates(data: pd.DataFrame, covariates: list[str], outcome: str,
                     lines: list[str]) -> pd.DataFrame:
    if not covariates:
        return data
    ok = data[covariates].notna().all(axis=1)
    if (~ok).any():
        lines.append(f"{outcome}: {int((~ok).sum())} row(s) without values of the covariates "
                     f"({', '.join(covariates)}) left out")
    return data[ok]


def model_session_outcome(data: pd.DataFrame, outcome: str, *, cohorts: list[str],
                          reference: str, covariates: list[str], log: bool,
                          models: ModelSettings, min_participants: int,
                          states: list[str] | None = None,
                          extra_notes: list[str] | None = None) -> tuple[pd.DataFrame,
                                                                         FitResult | None]:
    """Fit ``y ~ cohort (* state) (+ covariates) + (1 | participant)`` to prepared data.

    ``data`` has participant_id, cohort, y (already on the modelling scale), the
    covariate columns and, for the state model, state. Returns the comparison rows and
    the fit (None when a guard stopped it).
    """
    scale = "log" if log else "identity"
    guard = too_few_participants(data, cohorts, min_participants)
    if guard:
        return _skipped_row(outcome, MIXED, scale, guard, data), None
    X = cohort_design(data, cohorts, reference, covariates, states)
    fit = fit_mixed(data["y"], X, data["participant_id"],
                    confidence=models.confidence_level, df_method=models.df_method,
                    zero_variance_share=models.zero_variance_share,
                    fitter=models.mixed_fitter)
    return _fit_rows(outcome, MIXED, fit, scale, extra_notes or []), fit


def log_switch_rate(sessions: pd.DataFrame, offset: float) -> tuple[np.ndarray, list[str]]:
    """log(switches_per_hour), or log((switches + offset) / multi_hours) for every session
    when any session has zero switches; the note says which."""
    rate = pd.to_numeric(sessions["switches_per_hour"], errors="coerce").to_numpy(float)
    zero = int((rate <= 0).sum())
    if not zero:
        return np.log(rate), []
    y = np.log((pd.to_numeric(sessions["switches"]).to_numpy(float) + offset)
               / pd.to_numeric(sessions["multi_hours"]).to_numpy(float))
    return y, [f"{zero} session(s) with zero switches: log((switches + {offset:g}) / "
               "multi_hours) used for every session"]


def switch_rate_model(sessions: pd.DataFrame, models: ModelSettings, cohorts: list[str],
                      reference: str, min_participants: int = 3
                      ) -> tuple[pd.DataFrame, FitResult | None]:
    """The cohort comparison of log switches_per_hour, as :func:`compare` fits it.

    ``sessions``: participant_id, cohort, switches, multi_hours, switches_per_hour
    (sessions with NaN rates are left out). No covariates. Used by the power analysis,
    so that power is computed for exactly the model the study will be analysed with.
    """
    d = sessions[pd.to_numeric(sessions["switches_per_hour"], errors="coerce").notna()].copy()
    y, notes = log_switch_rate(d, models.zero_count_offset)
    d["y"] = y
    return model_session_outcome(d, "switches_per_hour", cohorts=cohorts, reference=reference,
                                 covariates=[], log=True, models=models,
                                 min_participants=min_participants, extra_notes=notes)


def _session_outcome_frame(sessions: pd.DataFrame, groups: pd.DataFrame, outcome: str,
                           ctx: _Context) -> list[tuple[str, pd.DataFrame, list[str],
                                                        str | None]]:
    """(outcome label, data with y, notes, problem) for one configured session outcome."""
    m = ctx.models
    log = outcome in m.log_outcomes
    out = []
    if outcome == "dwell_median_s":
        if groups is None or groups.empty or "dwell_median_s" not in groups.columns:
            return [(outcome, None, [], "not fitted: no dwell times (metrics/groups.csv is "
                     "empty or has no dwell_median_s column)")]
        for grp in sorted(groups["group"].astype(str).unique()):
            d = groups[groups["group"].astype(str) == grp]
            out.append((f"dwell_median_s[{grp}]", d, "dwell_median_s"))
    elif outcome == "multi_share":
        d = sessions.copy()
        with np.errstate(invalid="ignore", divide="ignore"):
            d["multi_share"] = np.where(d["media_hours"] > 0,
                                        d["multi_hours"] / d["media_hours"], np.nan)
        out.append((outcome, d, "multi_share"))
    else:
        if outcome not in sessions.columns:
            return [(outcome, None, [], f"not fitted: metrics/sessions.csv has no {outcome} "
                     "column")]
        out.append((outcome, sessions, outcome))

    result = []
    for label, d, col in out:
        notes: list[str] = []
        d = d.copy()
        values = pd.to_numeric(d[col], errors="coerce")
        missing = int(values.isna().sum())
        if missing:
            why = (" (less multi-platform time than [switching] min_multi_minutes)"
                   if col == "switches_per_hour" else "")
            ctx.summary.append(f"{label}: {missing} row(s) without a value{why} left out")
        d = d[values.notna()]
        values = values[values.notna()]
        problem = None
        if log:
            if col == "switches_per_hour":
                y, more = log_switch_rate(d, m.zero_count_offset)
                notes.extend(more)
                ctx.offset_used = ctx.offset_used or bool(more)
            elif (values <= 0).any():
                y = values * np.nan
                problem = (f"not fitted: {label} has {int((values <= 0).sum())} value(s) at or "
                           "below zero, which have no logarithm (remove it from [models] "
                           "log_outcomes)")
            else:
                y = np.log(values)
        else:
            y = values
        d["y"] = np.asarray(y, float)
        d = _with_covariates(d, ctx.covariates, label, ctx.summary)
        result.append((label, d, notes, problem))
    return result


def _count_check(sessions: pd.DataFrame, ctx: _Context,
                 mixed_rows: pd.DataFrame | None) -> pd.DataFrame:
    m, plan = ctx.models, ctx.plan
    fn = count_method(m.count_method)
    d = sessions.copy()
    sph = pd.to_numeric(d["switches_per_hour"], errors="coerce")
    d = d[sph.notna() & (pd.to_numeric(d["multi_hours"], errors="coerce") > 0)]
    d = _with_covariates(d, ctx.covariates, "switches (count model)", [])
    guard = too_few_participants(d, plan.cohorts, ctx.cohorts.min_participants)
    if guard:
        return _skipped_row("switches", m.count_method, "log", guard, d)
    X = cohort_design(d, plan.cohorts, plan.reference, ctx.covariates)
    fit = fn(pd.to_numeric(d["switches"]).to_numpy(float),
             pd.to_numeric(d["multi_hours"]).to_numpy(float), X,
             d["participant_id"].to_numpy(), cov_type=m.gee_cov_type,
             confidence=m.confidence_level, df_method=m.df_method)
    rows = _fit_rows("switches", m.count_method, fit, "log", [])
    ctx.variances.append(_variance_rows("switches", m.count_method, fit, "log"))
    if mixed_rows is not None:
        alpha = 1 - m.confidence_level
        mix = mixed_rows.set_index("term")
        for _, r in rows[rows["term"].map(is_cohort_term)].iterrows():
            if r["term"] not in mix.index:
                continue
            why = disagreement(mix.loc[r["term"]], r, alpha)
            c = r["term"][7:-1]
            if why:
                ctx.checks.append(
                    f"switch rate, {c} vs {plan.reference}: the mixed model (log "
                    f"switches_per_hour) and the count model ({m.count_method}) DISAGREE: "
                    f"{why}; read the rate ratio with caution")
            elif np.isfinite(r["p_value"]) and np.isfinite(mix.loc[r["term"], "p_value"]):
                ctx.checks.append(
                    f"switch rate, {c} vs {plan.reference}: the count model "
                    f"({m.count_method}) agrees with the mixed model")
    return rows


def _state_models(states: pd.DataFrame, ctx: _Context) -> list[pd.DataFrame]:
    m, plan = ctx.models, ctx.plan
    rows = []
    if states is None or states.empty:
        for outcome in m.state_outcomes:
            note = "not fitted: metrics/states.csv has no rows"
            rows.append(_skipped_row(outcome, MIXED, "identity", note, None))
        return rows
    st = states[states["state"].astype(str).isin(m.states)].copy()
    st["state"] = st["state"].astype(str)
    for outcome in m.state_outcomes:
        if outcome not in st.columns:
            note = f"not fitted: metrics/states.csv has no {outcome} column"
            rows.append(_skipped_row(outcome, MIXED, "identity", note, None))
            continue
        d = st.copy()
        d["y"] = pd.to_numeric(d[outcome], errors="coerce")
        d = d[d["y"].notna()]
        d = _with_covariates(d, ctx.covariates, outcome, ctx.summary)
        seen = set(d["state"])
        lacking = [s for s in m.states if s not in seen]
        if lacking:
            note = (f"not fitted: no {outcome} values in state(s) {', '.join(lacking)} "
                    "(too little valid time in that state?)")
            rows.append(_skipped_row(outcome, MIXED, "identity", note, d))
            continue
        r, fit = model_session_outcome(d, outcome, cohorts=plan.cohorts,
                                       reference=plan.reference, covariates=ctx.covariates,
                                       log=False, models=m,
                                       min_participants=ctx.cohorts.min_participants,
                                       states=m.states)
        if fit is not None:
            ctx.optimisers.add(fit.optimiser or "")
            ctx.variances.append(_variance_rows(outcome, MIXED, fit, "identity"))
        rows.append(r)
    return rows


# ------------------------------------------------------------------ the stage
def compare(sessions: pd.DataFrame, states: pd.DataFrame, groups: pd.DataFrame,
            roster: pd.DataFrame, models_cfg: ModelSettings, cohorts_cfg: CohortSettings,
            *, exclude_unusable: bool = True) -> ModelResults:
    """Every cohort comparison of a study, with participants as the unit.

    Parameters
    ----------
    sessions, states, groups : metrics/sessions.csv, metrics/states.csv and
        metrics/groups.csv as DataFrames (CONTRACT §3); ``sessions`` may carry a
        boolean ``usable`` column from quality control.
    roster : participant_id, cohort and covariate columns.
    models_cfg, cohorts_cfg : the ``[models]`` and ``[cohorts]`` settings.
    exclude_unusable : leave out sessions whose ``usable`` is False
        (``[qc] exclude_flagged_from_models``).

    Returns
    -------
    ModelResults
        ``comparisons`` (one row per model term, :data:`COMPARISON_COLUMNS`),
        ``summary`` (readable lines) and ``methods`` (method texts with references).
    """
    m, c = models_cfg, cohorts_cfg
    _check_settings(m, roster)
    lines: list[str] = []
    sessions, (states, groups) = _drop_unusable(
        sessions, [states if states is not None else pd.DataFrame(columns=["participant_id",
                                                                           "session_id"]),
                   groups if groups is not None else pd.DataFrame(columns=["participant_id",
                                                                           "session_id"])],
        exclude_unusable, lines)
    sessions = _attach(sessions, roster, m.covariates)
    states = _attach(states, roster, m.covariates) if len(states) else states
    groups = _attach(groups, roster, m.covariates) if len(groups) else groups

    seen = sorted(sessions["cohort"].dropna().astype(str).unique())
    plan = plan_cohorts(seen, sorted(roster["cohort"].astype(str).unique()), c)
    if c.include:
        dropped = sorted(set(seen) - set(c.include))
        if dropped:
            lines.append(f"models: cohort(s) {', '.join(dropped)} left out ([cohorts] include)")
        sessions = sessions[sessions["cohort"].isin(plan.cohorts)]
        if len(states):
            states = states[states["cohort"].isin(plan.cohorts)]
        if len(groups):
            groups = groups[groups["cohort"].isin(plan.cohorts)]
    ctx = _Context(plan, list(m.covariates), m, c, summary=lines)

    methods = _methods(m)
    if plan.problem:
        lines.append("models: " + plan.problem)
        rows = [_skipped_row(o, MIXED, "log" if o in m.log_outcomes else "identity",
                             plan.problem, None)
                for o in [*m.session_outcomes, *m.state_outcomes]]
        rows.append(_skipped_row("switches", m.count_method, "log", plan.problem, None))
        return ModelResults(pd.concat(rows, ignore_index=True), lines, methods)

    n_p = sessions["participant_id"].nunique()
    lines.insert(0, f"models: cohorts {', '.join(plan.cohorts)} (reference {plan.reference}); "
                 f"{n_p} participants, {len(sessions)} sessions")
    rows: list[pd.DataFrame] = []
    switch_rows = None
    for outcome in m.session_outcomes:
        for label, d, notes, problem in _session_outcome_frame(sessions, groups, outcome, ctx):
            scale = "log" if outcome in m.log_outcomes else "identity"
            if problem:
                rows.append(_skipped_row(label, MIXED, scale, problem, d))
                continue
            r, fit = model_session_outcome(
                d, label, cohorts=plan.cohorts, reference=plan.reference,
                covariates=ctx.covariates, log=scale == "log", models=m,
                min_participants=c.min_participants, extra_notes=notes)
            if fit is not None:
                ctx.optimisers.add(fit.optimiser or "")
                ctx.variances.append(_variance_rows(label, MIXED, fit, scale))
            rows.append(r)
            if label == "switches_per_hour":
                switch_rows = r
    if {"switches", "multi_hours", "switches_per_hour"} <= set(sessions.columns):
        rows.append(_count_check(sessions, ctx, switch_rows))
    rows.extend(_state_models(states, ctx))

    table = pd.concat(rows, ignore_index=True)
    family = (table["model"] == MIXED) & table["term"].map(is_cohort_term) \
        & table["p_value"].notna()
    table.loc[family, "p_fdr"] = adjust_p(table.loc[family, "p_value"].to_numpy(),
                                          m.fdr_method)
    lines.extend(_sentences(table, ctx))
    if ctx.offset_used:
        methods["zero_count_offset"] = (
            f"sessions with zero switches: log((switches + {m.zero_count_offset:g}) / "
            "multi_hours) for every session (continuity correction, Anscombe 1948, "
            "Biometrika 35:246-254)")
    if "powell" in ctx.optimisers:  # the statsmodels fitter's fall-back
        methods["optimiser"] = ("where the gradient optimiser failed, the REML fit was "
                                "completed by Powell's derivative-free method (Powell 1964, "
                                "Comput J 7:155-162)")
    parts = [v for v in ctx.variances if len(v)]
    variances = pd.concat(parts, ignore_index=True) if parts else \
        pd.DataFrame(columns=VARIANCE_COLUMNS)
    return ModelResults(table, lines, methods, variances)


def _sentences(table: pd.DataFrame, ctx: _Context) -> list[str]:
    m, plan = ctx.models, ctx.plan
    out = []
    ref_state = m.states[0]
    for (outcome, model), block in table.groupby(["outcome", "model"], sort=False):
        label = "mixed model" if model == MIXED else f"count model {model}"
        notes = block["note"].dropna().astype(str)
        note = notes.iloc[0] if len(notes) else ""
        fitted = block["estimate"].notna().any()
        if not fitted:
            out.append(f"{outcome} ({label}): {note}")
            continue
        is_state = block["term"].str.startswith("state[").any()
        show = block[block["term"].map(is_cohort_term) | block["term"].str.startswith("state[")]
        for _, r in show.iterrows():
            rate = outcome in ("switches_per_hour", "switches")
            text = row_sentence(r, plan.reference, ref_state if is_state else None,
                                m.confidence_level, label, rate=rate)
            if np.isfinite(r["p_fdr"]) and r["p_fdr"] <= m.fdr_q:
                text += f": a discovery at false discovery rate {m.fdr_q:g}"
            out.append(text)
        if note:
            out.append(f"{outcome} ({label}): note: {note}")
        if model == m.count_method:
            out.extend(ctx.checks)
    return out


def _methods(m: ModelSettings) -> dict[str, str]:
    return {
        "mixed_model": "linear mixed models fitted by restricted maximum likelihood with a "
        "random intercept per participant (Laird & Ware 1982, Biometrics 38:963-974); "
        + MIXED_FITTER_REFERENCES[m.mixed_fitter] + "; session outcomes as outcome ~ "
        "cohort, per-state arousal as outcome ~ cohort * state",
        "degrees_of_freedom": DF_REFERENCES[m.df_method],
        "count_model": COUNT_REFERENCES[m.count_method] + "; "
        + COUNT_REFERENCES[m.gee_cov_type],
        "fdr": f"{FDR_REFERENCES[m.fdr_method]} at q = {m.fdr_q:g}, across the cohort terms "
        "of the mixed models",
    }
