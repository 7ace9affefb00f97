"""SynthOptions: every option described, typos refused with a suggestion."""

from __future__ import annotations

import pytest
from pydantic import BaseModel

from pipeline.errors import ConfigError
from synthetic_diaries.options import CohortBehaviour, SynthOptions, options_from_dict


def _models(model: type[BaseModel]):
    yield model
    for field in model.model_fields.values():
        ann = field.annotation
        for cand in getattr(ann, "__args__", (ann,)):
            if isinstance(cand, type) and issubclass(cand, BaseModel) and cand is not model:
                yield from _models(cand)


def test_every_option_has_a_description():
    missing = [f"{m.__name__}.{name}" for m in _models(SynthOptions)
               for name, f in m.model_fields.items() if not f.description]
    assert missing == []
    assert CohortBehaviour in set(_models(SynthOptions))


def test_unknown_option_gets_did_you_mean():
    with pytest.raises(ConfigError) as exc:
        options_from_dict({"clock": {"drift_pmm": 3.0}}, "my.toml")
    assert "did you mean 'drift_ppm'" in exc.value.message
    assert "my.toml" in exc.value.message


def test_unknown_bout_distribution_lists_the_choices():
    cohort = {"name": "a", "bout_distribution": "weibull"}
    with pytest.raises(ConfigError) as exc:
        options_from_dict({"cohorts": [cohort]})
    assert "gamma" in exc.value.message and "lognormal" in exc.value.message


def test_platform_outside_the_vocabulary_is_refused():
    cohort = {"name": "a", "single_platforms": {"radio": 1.0}}
    with pytest.raises(ConfigError) as exc:
        options_from_dict({"cohorts": [cohort]})
    assert "radio" in exc.value.message


def test_cohort_names_follow_the_id_rule():
    with pytest.raises(ConfigError):
        options_from_dict({"cohorts": [{"name": "late adopters"}]})


def test_without_artifacts_zeroes_every_rate():
    clean = SynthOptions().artifacts.without()
    assert set(clean.rates().values()) == {0.0}
    assert SynthOptions().artifacts.dropout_rate_per_hour > 0  # the original is unchanged
