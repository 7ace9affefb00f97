"""Each guard gives a clear line in comparisons.csv and in the summary, never a crash."""

import numpy as np
import pandas as pd
import pytest

from pipeline.config import CohortSettings, ModelSettings
from pipeline.errors import ConfigError
from pipeline.models import compare
from pipeline.models.mixed import fit_mixed

from models_tables import make_tables

ONE = ModelSettings(session_outcomes=["media_hours"], state_outcomes=[])


def run(tables, models=ONE, cohorts=None, **kw):
    s, st, g, r = tables
    return compare(s, st, g, r, models, cohorts or CohortSettings(), **kw)


def rows_of(res, outcome, model="mixed_reml"):
    c = res.comparisons
    return c[(c.outcome == outcome) & (c.model == model)]


def test_fewer_than_two_cohorts_gives_a_note_per_outcome_and_a_summary_line():
    res = run(make_tables(cohorts=("a",)), models=ModelSettings())
    c = res.comparisons
    assert len(c) > 0 and c.estimate.isna().all() and (~c.converged).all()
    assert c.note.str.contains("only one cohort \\(a\\)").all()
    assert {"switches_per_hour", "arousal_range", "switches"} <= set(c.outcome)
    assert any("only one cohort (a)" in line for line in res.summary)


def test_reference_cohort_without_usable_sessions_is_a_guard_not_a_crash():
    s, st, g, r = make_tables()
    s.loc[s.cohort == "a", "usable"] = False
    res = run((s, st, g, r), cohorts=CohortSettings(reference="a"))
    assert res.comparisons.note.str.contains("reference cohort a has no usable").all()
    assert any("reference cohort a has no usable" in line for line in res.summary)
    # without a configured reference, the one cohort left is said
    res = run((s, st, g, r))
    assert any("only one cohort (b)" in line for line in res.summary)


def test_cohort_names_in_settings_must_exist():
    with pytest.raises(ConfigError) as err:
        run(make_tables(), cohorts=CohortSettings(reference="c"))
    assert "a, b" in err.value.hint


def test_too_few_participants_per_cohort():
    s, st, g, r = make_tables()
    keep = ~s.participant_id.isin([f"b{i:02d}" for i in range(2, 8)])
    res = run((s[keep], st, g, r))
    row = rows_of(res, "media_hours").iloc[0]
    assert np.isnan(row.estimate) and not row.converged
    assert "b has 2" in row.note and "at least 3" in row.note
    assert any("media_hours" in x and "b has 2" in x for x in res.summary)
    # the threshold is the setting
    res2 = run((s[keep], st, g, r), cohorts=CohortSettings(min_participants=2))
    assert rows_of(res2, "media_hours").estimate.notna().any()


def test_singular_design_names_the_collinear_term():
    s, st, g, r = make_tables()
    r = r.assign(site=r.cohort.map({"a": "north", "b": "south"}))
    res = run((s, st, g, r), models=ModelSettings(session_outcomes=["media_hours"],
                                                  state_outcomes=[], covariates=["site"]))
    rows = rows_of(res, "media_hours")
    assert rows.estimate.isna().all()
    assert rows.note.iloc[0].startswith("not fitted: singular design, site[south]")
    assert any("singular design" in x for x in res.summary)


def test_non_converging_fit_is_flagged():
    # an outcome fully determined by cohort: no residual and no participant variance, so
    # REML has no interior optimum and neither optimiser converges
    s, st, g, r = make_tables()
    s["media_hours"] = np.where(s.cohort == "a", 1.0, 2.0)
    res = run((s, st, g, r))
    rows = rows_of(res, "media_hours")
    assert not rows.converged.any()
    assert "did not converge" in rows.note.iloc[0]
    assert any("[did not converge]" in x for x in res.summary)
    assert any("did not converge" in x and x.startswith("media_hours") for x in res.summary)


def test_participant_variance_at_zero_is_reported():
    # outcome independent across sessions: no participant effect at all
    rng = np.random.default_rng(3)
    s, st, g, r = make_tables()
    s["media_hours"] = rng.normal(2.0, 0.3, len(s))
    res = run((s, st, g, r))
    rows = rows_of(res, "media_hours")
    assert rows.converged.all()
    assert "participant variance at zero" in rows.note.iloc[0]
    v = res.variances[res.variances.outcome == "media_hours"].set_index("component").estimate
    assert v["participant_variance"] < 1e-4 * v["residual_variance"]
    assert any("participant variance at zero" in x for x in res.summary)


def test_constant_outcome_is_not_fitted():
    g = np.repeat(np.arange(6), 2)
    X = pd.DataFrame({"Intercept": 1.0, "cohort[b]": (g >= 3).astype(float)})
    fit = fit_mixed(np.ones(12), X, g)
    assert not fit.fitted and "every value of the outcome is the same" in fit.notes[0]


def test_state_missing_from_the_data_is_said():
    s, st, g, r = make_tables()
    st = st[st.state != "multi"]
    res = run((s, st, g, r), models=ModelSettings(session_outcomes=[],
                                                  state_outcomes=["arousal_range"]))
    row = rows_of(res, "arousal_range").iloc[0]
    assert "no arousal_range values in state(s) multi" in row.note
