"""Small simulated study tables in the CONTRACT §3 layout, for the models tests."""

import numpy as np
import pandas as pd


def make_tables(seed=0, n_per_cohort=8, sessions=3, rate_ratio=1.5, base_rate=60.0,
                participant_sd=0.3, cohorts=("a", "b"), compression=0.8,
                compression_b=0.8):
    """sessions, states, groups, roster of a simulated two-cohort study.

    Switch counts: Poisson with a lognormal participant effect and multi_hours exposure;
    cohort b's rate is ``rate_ratio`` times cohort a's. Arousal range in multi is
    ``compression`` (cohort a) or ``compression_b`` (cohort b) times the single range.
    """
    rng = np.random.default_rng(seed)
    rows, st, gr, ros = [], [], [], []
    for ci, cohort in enumerate(cohorts):
        for i in range(n_per_cohort):
            pid = f"{cohort}{i:02d}"
            u = rng.normal(0, participant_sd)
            ros.append({"participant_id": pid, "cohort": cohort,
                        "birth_year": int(rng.integers(1950, 2005)),
                        "household": "h1" if i % 2 else "h2"})
            level = rng.normal(1.0, 0.2)
            for s in range(sessions):
                sid = f"s{s + 1}"
                coded = rng.uniform(1.5, 2.5)
                media = coded * rng.uniform(0.7, 0.95)
                multi = media * rng.uniform(0.2, 0.5)
                rate = base_rate * (rate_ratio if ci == 1 else 1.0) * np.exp(u)
                k = int(rng.poisson(rate * multi))
                rows.append({"participant_id": pid, "session_id": sid, "cohort": cohort,
                             "coded_hours": coded, "media_hours": media, "multi_hours": multi,
                             "switches": k, "switches_per_hour": k / multi,
                             "eda_valid_fraction": 0.95, "compression_ratio": np.nan,
                             "usable": True})
                rng_single = level * np.exp(rng.normal(0, 0.15))
                comp = compression if ci == 0 else compression_b
                for state, rngv in (("none", np.nan), ("single", rng_single),
                                    ("multi", rng_single * comp * np.exp(rng.normal(0, 0.1)))):
                    mean = rng.normal(0, 0.2)
                    st.append({"participant_id": pid, "session_id": sid, "cohort": cohort,
                               "state": state, "seconds": 1800, "valid_seconds": 1700,
                               "arousal_mean": mean if state != "none" else np.nan,
                               "arousal_p05": mean - rngv / 2, "arousal_p95": mean + rngv / 2,
                               "arousal_range": rngv, "scr_per_min": rng.gamma(4, 0.5),
                               "scr_amplitude_mean_us": 0.3,
                               "hr_mean_bpm": rng.normal(70, 5)})
                for group in ("print", "screen"):
                    gr.append({"participant_id": pid, "session_id": sid, "cohort": cohort,
                               "group": group, "in_view_seconds": 3000,
                               "attended_seconds": 2000, "bouts": 100,
                               "dwell_median_s": float(rng.lognormal(np.log(8), 0.3))})
    return pd.DataFrame(rows), pd.DataFrame(st), pd.DataFrame(gr), pd.DataFrame(ros)


