"""Per-fit CPU time of the random-intercept mixed model: profiled REML against statsmodels.

The designs are those the models stage fits for a study of 60 participants in two
cohorts: a session outcome (y ~ cohort, 2 sessions each, 120 rows) and a per-state
outcome (y ~ cohort * state, 2 sessions x 2 states each, 240 rows), plus an unbalanced
version of the latter (1 to 6 rows per participant). Both fitters go through
:func:`pipeline.models.mixed.fit_mixed`, so the times include the design checks and the
degrees of freedom they share. CPU time (``time.process_time``), so other load on the
machine matters less than for wall time.

    .venv/bin/python benchmarks/mixed_fit.py
"""

from __future__ import annotations

import sys
import time

import numpy as np
import pandas as pd

from pipeline.models.mixed import fit_mixed

PARTICIPANTS = 60
REPEATS = {"profiled_reml": 20, "statsmodels": 3}


def design(rng: np.random.Generator, rows_per_participant: np.ndarray, states: bool
           ) -> tuple[np.ndarray, pd.DataFrame, np.ndarray]:
    g = np.repeat(np.arange(PARTICIPANTS), rows_per_participant)
    cohort = (np.arange(PARTICIPANTS) >= PARTICIPANTS // 2)[g].astype(float)
    cols = {"Intercept": np.ones(len(g)), "cohort[b]": cohort}
    if states:
        state = np.concatenate([np.arange(k) % 2 for k in rows_per_participant]).astype(float)
        cols.update({"state[multi]": state, "cohort[b]:state[multi]": cohort * state})
    X = pd.DataFrame(cols)
    beta = np.linspace(1.0, 0.2, X.shape[1])
    y = X.to_numpy() @ beta + rng.normal(0, 0.6, PARTICIPANTS)[g] + rng.normal(0, 1, len(g))
    return y, X, np.array([f"p{i:02d}" for i in g])


def cpu_per_fit(y, X, g, fitter: str) -> tuple[float, object]:
    fit = fit_mixed(y, X, g, fitter=fitter)  # warm-up (imports, caches)
    t0 = time.process_time()
    for _ in range(REPEATS[fitter]):
        fit = fit_mixed(y, X, g, fitter=fitter)
    return (time.process_time() - t0) / REPEATS[fitter], fit


def main() -> int:
    rng = np.random.default_rng(2024)
    cases = {
        "session outcome, 120 rows": design(rng, np.full(PARTICIPANTS, 2), states=False),
        "state outcome, 240 rows": design(rng, np.full(PARTICIPANTS, 4), states=True),
        "state outcome, unbalanced": design(rng, rng.integers(1, 7, PARTICIPANTS),
                                            states=True),
    }
    print(f"{'design':28s} {'profiled ms':>12s} {'statsmodels ms':>15s} {'speed-up':>9s} "
          f"{'max |d est|/se':>15s} {'max d se (rel)':>15s} {'d REML crit':>12s}")
    for name, (y, X, g) in cases.items():
        t_fast, fast = cpu_per_fit(y, X, g, "profiled_reml")
        t_slow, slow = cpu_per_fit(y, X, g, "statsmodels")
        a, b = fast.terms, slow.terms
        d_est = float(np.max(np.abs(a["estimate"] - b["estimate"]) / a["std_error"]))
        d_se = float(np.max(np.abs(a["std_error"] / b["std_error"] - 1)))
        d_crit = fast.reml_criterion - slow.reml_criterion
        print(f"{name + f' ({len(y)})':28s} {1e3 * t_fast:12.2f} {1e3 * t_slow:15.1f} "
              f"{t_slow / t_fast:8.0f}x {d_est:15.1e} {d_se:15.1e} {d_crit:+12.1e}")
    print("d: profiled minus statsmodels; statsmodels' standard errors come from its full "
          "Hessian and differ from lme4's (the profiled fitter's) in unbalanced designs")
    return 0


if __name__ == "__main__":
    sys.exit(main())
