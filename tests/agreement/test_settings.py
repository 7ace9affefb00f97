"""The [agreement] settings: declared defaults, documented defaults, validation."""

from __future__ import annotations

import tomllib

import pytest

from pipeline.config import AgreementSettings, defaults_file, parse_config
from pipeline.errors import ConfigError


def test_defaults_toml_agreement_section_matches_the_schema():
    with open(defaults_file(), "rb") as fh:
        documented = tomllib.load(fh)["agreement"]
    assert documented == AgreementSettings().model_dump()
    assert all(f.description for f in AgreementSettings.model_fields.values())


def test_unknown_switch_matching_is_refused_with_the_choices():
    with pytest.raises(ConfigError) as err:
        parse_config({"agreement": {"switch_matching": "gready"}})
    assert "greedy" in err.value.render() and "optimal" in err.value.render()
    with pytest.raises(ConfigError):
        parse_config({"agreement": {"switch_tolerance_s": -1}})
    assert parse_config({"agreement": {"switch_matching": "greedy"}}).agreement.switch_matching \
        == "greedy"
