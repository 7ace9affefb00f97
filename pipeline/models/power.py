"""Simulation-based power of the cohort switch-rate comparison.

Each simulated study has two cohorts of ``n`` participants with ``sessions`` sessions of
``hours`` hours. Media codes come from the synthetic generator
(:func:`synthetic_diaries.generator.simulate_session_codes`, codes only, no signals),
switches from the pipeline's own :func:`~pipeline.metrics.switching.find_bouts` and
:func:`~pipeline.metrics.switching.find_switches`, and the comparison is the very
mixed model the study will be analysed with (:func:`pipeline.models.switch_rate_model`).
Power is the share of simulated studies in which the cohort term is significant, with
a binomial interval for the Monte-Carlo error.

The effect: every participant has a lognormal switch-rate multiplier (the participant
random effect); in the comparison cohort, bout lengths in multi-platform time are
further divided by a factor calibrated so that the behaviour's design switch rate is
``rate_ratio`` times the reference cohort's. Because gaps and stretch edges do not
scale, the realised ratio is measured too: ``true_rate_ratio`` comes from a very large
paired simulation (the same participant multipliers in both cohorts), the value the
mixed model's rate ratio estimates.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Iterable

import numpy as np
import pandas as pd
from scipy import optimize, stats

from pipeline.config import DwellSettings, ModelSettings, SwitchSettings
from pipeline.errors import choose, ConfigError

POWER_COLUMNS = ["participants_per_cohort", "sessions_per_participant", "session_hours",
                 "rate_ratio", "true_rate_ratio", "power", "ci_low", "ci_high", "interval",
                 "n_simulations", "n_significant", "n_fitted", "n_not_converged",
                 "median_estimated_ratio", "n_covered", "ci_coverage", "alpha", "participant_sd_log",
                 "bout_rate_multiplier", "seed"]

STUDY_COHORTS = ("reference", "comparison")


# --------------------------------------------------------- binomial intervals
def wilson_interval(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion k / n.

    References
    ----------
    Wilson, E. B. (1927). Probable inference, the law of succession, and statistical
    inference. J Am Stat Assoc 22:209-212.
    Newcombe, R. G. (1998). Two-sided confidence intervals for the single proportion:
    comparison of seven methods. Stat Med 17:857-872.
    """
    if n <= 0:
        return (np.nan, np.nan)
    z = stats.norm.ppf(0.5 + confidence / 2)
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return (max(0.0, centre - half), min(1.0, centre + half))


def clopper_pearson_interval(k: int, n: int, confidence: float = 0.95
                             ) -> tuple[float, float]:
    """Exact (Clopper-Pearson) interval for a binomial proportion, from beta quantiles.

    References
    ----------
    Clopper, C. J. & Pearson, E. S. (1934). The use of confidence or fiducial limits
    illustrated in the case of the binomial. Biometrika 26:404-413.
    """
    if n <= 0:
        return (np.nan, np.nan)
    a = 1 - confidence
    lo = 0.0 if k == 0 else float(stats.beta.ppf(a / 2, k, n - k + 1))
    hi = 1.0 if k == n else float(stats.beta.ppf(1 - a / 2, k + 1, n - k))
    return (lo, hi)


INTERVAL_METHODS: dict[str, Callable[[int, int, float], tuple[float, float]]] = {
    "wilson": wilson_interval,                      # Wilson 1927
    "clopper_pearson": clopper_pearson_interval,    # Clopper & Pearson 1934
}


def binomial_interval(k: int, n: int, confidence: float, method: str) -> tuple[float, float]:
    fn = choose(INTERVAL_METHODS, method, "interval method")
    return fn(k, n, confidence)


# ----------------------------------------------------------------- scenario
@dataclass(frozen=True)
class PowerScenario:
    """What is held fixed while the number of participants varies."""

    behaviour: object  # synthetic_diaries.options.CohortBehaviour
    sessions: int = 3
    hours: float = 2.0
    rate_ratio: float = 1.5
    participant_sd_log: float = 0.25


def default_behaviour():
    """The synthetic generator's default (first) cohort behaviour."""
    from synthetic_diaries.options import SynthOptions

    return SynthOptions().cohorts[0]


def bout_rate_multiplier(behaviour, rate_ratio: float, max_gap_s: int = 3) -> float:
    """Divisor of bout lengths giving ``rate_ratio`` times the design switch rate.

    Solves design_rate(m) / design_rate(1) = rate_ratio with Brent's method, on the
    generator's design switch rate per multi-platform hour.

    References
    ----------
    Brent, R. P. (1973). Algorithms for Minimization without Derivatives. Prentice-Hall.
    """
    from synthetic_diaries.codes import design_switch_rate_per_multi_hour as design

    if rate_ratio == 1:
        return 1.0
    base = design(behaviour, max_gap_s, 1.0)

    def gap(m: float) -> float:
        return design(behaviour, max_gap_s, m) / base - rate_ratio

    lo, hi = (1.0, 2.0) if rate_ratio > 1 else (0.5, 1.0)
    for _ in range(60):
        if gap(lo) * gap(hi) < 0:
            break
        lo, hi = (lo, hi * 2) if rate_ratio > 1 else (lo / 2, hi)
    else:
        raise ConfigError(f"rate ratio {rate_ratio:g} cannot be reached by shortening or "
                          "lengthening attention bouts",
                          hint="choose a rate ratio nearer 1")
    return float(optimize.brentq(gap, lo, hi, xtol=1e-10))


# ------------------------------------------------------------- simulation
def session_switches(codes: pd.DataFrame, switching: SwitchSettings) -> tuple[int, float]:
    """(switches, multi_hours) of one fully coded simulated session, by the pipeline."""
    from pipeline.metrics.states import classify_states
    from pipeline.metrics.switching import find_bouts, find_switches

    tl = codes.assign(coded=True, signal_valid=True)
    # the state of each distinct in-view combination (a session has few), mapped back
    combo, uniques = pd.factorize(tl["in_view"].astype(object))
    is_multi = (classify_states(pd.Series(uniques, dtype=object))["state"] == "multi") \
        .to_numpy(bool)
    bouts = find_bouts(tl, switching, DwellSettings(censor_at_invalid_signal=False))
    n = len(find_switches(bouts, tl, switching))
    multi_hours = float(is_multi[combo].sum()) / 3600.0
    return n, multi_hours


def _session_row(rng: np.random.Generator, scenario: PowerScenario, multiplier: float,
                 switching: SwitchSettings) -> tuple[int, float]:
    from synthetic_diaries.generator import simulate_session_codes

    duration = int(round(scenario.hours * 3600))
    codes = simulate_session_codes(rng, scenario.behaviour, duration,
                                   rate_multiplier=multiplier)
    return session_switches(codes, switching)


def _rows(participant_id: str, cohort: str, counts: Iterable[tuple[int, float]],
          switching: SwitchSettings) -> list[dict]:
    out = []
    for s, (k, mh) in enumerate(counts):
        rate = k / mh if mh * 60 >= switching.min_multi_minutes and mh > 0 else np.nan
        out.append({"participant_id": participant_id, "session_id": f"s{s + 1}",
                    "cohort": cohort, "switches": k, "multi_hours": mh,
                    "switches_per_hour": rate})
    return out


def simulate_study(rng: np.random.Generator, scenario: PowerScenario, n_per_cohort: int,
                   multiplier: float, switching: SwitchSettings) -> pd.DataFrame:
    """Session rows (participant_id, session_id, cohort, switches, multi_hours,
    switches_per_hour) of one simulated two-cohort study."""
    rows: list[dict] = []
    for ci, cohort in enumerate(STUDY_COHORTS):
        for j in range(n_per_cohort):
            u = float(np.exp(rng.normal(0.0, scenario.participant_sd_log)))
            m = u * (multiplier if ci == 1 else 1.0)
            counts = [_session_row(rng, scenario, m, switching)
                      for _ in range(scenario.sessions)]
            rows += _rows(f"{cohort[0]}{j:03d}", cohort, counts, switching)
    return pd.DataFrame(rows)


def true_log_rate_ratio(scenario: PowerScenario, multiplier: float,
                        switching: SwitchSettings, seed: int, n_sessions: int = 400
                        ) -> tuple[float, float]:
    """E[log rate | comparison] - E[log rate | reference] from a very large paired study.

    Each of ``n_sessions`` pairs shares one participant multiplier (common random
    numbers), which removes the participant variance from the difference. Returns the
    estimate and its standard error.

    References
    ----------
    Glasserman, P. & Yao, D. D. (1992). Some guidelines and guarantees for common random
    numbers. Manage Sci 38:884-908.
    """
    rng = np.random.default_rng([seed, 7, 7])
    diffs = []
    for _ in range(n_sessions):
        u = float(np.exp(rng.normal(0.0, scenario.participant_sd_log)))
        k0, h0 = _session_row(rng, scenario, u, switching)
        k1, h1 = _session_row(rng, scenario, u * multiplier, switching)
        if min(h0, h1) * 60 < switching.min_multi_minutes or min(k0, k1) == 0:
            continue
        diffs.append(np.log(k1 / h1) - np.log(k0 / h0))
    d = np.asarray(diffs)
    return float(d.mean()), float(d.std(ddof=1) / np.sqrt(len(d)))


@dataclass
class StudyOutcome:
    """The mixed model's cohort term in one simulated study."""

    fitted: bool
    converged: bool
    estimate: float
    ci_low: float
    ci_high: float
    p_value: float


def analyse_study(sessions: pd.DataFrame, models: ModelSettings) -> StudyOutcome:
    from pipeline.models import switch_rate_model

    rows, fit = switch_rate_model(sessions, models, list(STUDY_COHORTS), STUDY_COHORTS[0],
                                  min_participants=2)
    r = rows[rows["term"] == f"cohort[{STUDY_COHORTS[1]}]"]
    if fit is None or r.empty or not np.isfinite(r["estimate"].iloc[0]):
        return StudyOutcome(False, False, np.nan, np.nan, np.nan, np.nan)
    r = r.iloc[0]
    return StudyOutcome(True, bool(r["converged"]), float(r["estimate"]), float(r["ci_low"]),
                        float(r["ci_high"]), float(r["p_value"]))


def _one_study(task: tuple) -> tuple[tuple[int, int], StudyOutcome]:
    seed, n, i, scenario, multiplier, switching, models = task
    rng = np.random.default_rng([seed, n, i])
    return (n, i), analyse_study(simulate_study(rng, scenario, n, multiplier, switching),
                                 models)


def power_table(participants: list[int], scenario: PowerScenario, simulations: int,
                seed: int, *, models: ModelSettings | None = None,
                switching: SwitchSettings | None = None, alpha: float = 0.05,
                interval: str = "wilson", interval_confidence: float = 0.95,
                truth_sessions: int = 400, workers: int = 1,
                progress: Callable[[int, int], None] | None = None) -> pd.DataFrame:
    """Power of the switch-rate comparison for each number of participants per cohort.

    Parameters
    ----------
    participants : participants per cohort, one or several values (each >= 2).
    scenario : sessions, hours, rate ratio, participant SD and the behaviour simulated.
    simulations : simulated studies per value.
    seed : study ``i`` of size ``n`` uses the stream ``(seed, n, i)``, so adding a size
        leaves the others' results unchanged.
    models : the ``[models]`` settings of the analysis (df method, confidence level).
    switching : the ``[switching]`` settings that define a switch.
    alpha : a study is a success when the cohort term's p-value is below this.
    interval, interval_confidence : the binomial interval of the power.
    truth_sessions : session pairs of the paired simulation giving true_rate_ratio.
    workers : processes simulating studies in parallel (results do not depend on it).
    progress : called with (studies done, studies in all).

    Returns
    -------
    DataFrame with :data:`POWER_COLUMNS`, one row per number of participants.
    """
    models = models or ModelSettings()
    switching = switching or SwitchSettings()
    binomial_interval(0, 1, interval_confidence, interval)  # fail early on a bad name
    bad = [n for n in participants if n < 2]
    if bad or not participants:
        raise ConfigError(f"participants per cohort {bad or participants}: each must be 2 "
                          "or more", hint="e.g. --participants 8,12,16")
    if simulations < 1:
        raise ConfigError("simulations must be at least 1")
    multiplier = bout_rate_multiplier(scenario.behaviour, scenario.rate_ratio,
                                      switching.max_gap_s)
    true_log, _ = true_log_rate_ratio(scenario, multiplier, switching, seed, truth_sessions)
    tasks = [(seed, n, i, scenario, multiplier, switching, models)
             for n in participants for i in range(simulations)]
    results: dict[tuple[int, int], StudyOutcome] = {}
    if workers > 1:
        from concurrent.futures import ProcessPoolExecutor

        with ProcessPoolExecutor(max_workers=workers) as pool:
            for done, (key, out) in enumerate(pool.map(_one_study, tasks, chunksize=4), 1):
                results[key] = out
                if progress:
                    progress(done, len(tasks))
    else:
        for done, task in enumerate(tasks, 1):
            key, out = _one_study(task)
            results[key] = out
            if progress:
                progress(done, len(tasks))
    rows = []
    for n in participants:
        outs = [results[(n, i)] for i in range(simulations)]
        fitted = [o for o in outs if o.fitted]
        k = sum(1 for o in fitted if o.p_value < alpha)
        lo, hi = binomial_interval(k, simulations, interval_confidence, interval)
        covered = [o.ci_low <= true_log <= o.ci_high for o in fitted
                   if np.isfinite(o.ci_low)]
        rows.append({
            "participants_per_cohort": n, "sessions_per_participant": scenario.sessions,
            "session_hours": scenario.hours, "rate_ratio": scenario.rate_ratio,
            "true_rate_ratio": float(np.exp(true_log)), "power": k / simulations,
            "ci_low": lo, "ci_high": hi, "interval": interval, "n_simulations": simulations,
            "n_significant": k, "n_fitted": len(fitted),
            "n_not_converged": sum(1 for o in fitted if not o.converged),
            "median_estimated_ratio": float(np.exp(np.median([o.estimate for o in fitted])))
            if fitted else np.nan,
            "n_covered": int(np.sum(covered)),
            "ci_coverage": float(np.mean(covered)) if covered else np.nan,
            "alpha": alpha, "participant_sd_log": scenario.participant_sd_log,
            "bout_rate_multiplier": multiplier, "seed": seed})
    return pd.DataFrame(rows, columns=POWER_COLUMNS)


def power_methods(interval: str = "wilson") -> dict[str, str]:
    """Method text with references for a report on the power analysis."""
    ref = {"wilson": "Wilson (1927), J Am Stat Assoc 22:209-212",
           "clopper_pearson": "Clopper & Pearson (1934), Biometrika 26:404-413"}[interval]
    return {"power": "simulation-based power: synthetic media codes per session, switches "
            "by the pipeline's definitions, the cohort term of the same mixed model on log "
            f"switches_per_hour; Monte-Carlo interval of the power by {ref}"}
