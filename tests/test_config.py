"""The declared configuration: defaults.toml, the schema and the refusals agree."""

import tomllib

import pytest
from pydantic import BaseModel

from pipeline.config import Config, defaults_file, parse_config, resolve_study
from pipeline.errors import ConfigError


def _models(model: type[BaseModel], prefix: str = ""):
    yield prefix or "Config", model
    for name, field in model.model_fields.items():
        ann = field.annotation
        for cand in getattr(ann, "__args__", (ann,)):
            if isinstance(cand, type) and issubclass(cand, BaseModel):
                yield from _models(cand, f"{prefix}.{name}" if prefix else name)


def test_every_setting_has_a_description():
    missing = [f"{where}.{name}" for where, model in _models(Config)
               for name, field in model.model_fields.items() if not field.description]
    assert missing == []


def test_defaults_toml_equals_the_schema_defaults():
    data = tomllib.loads(defaults_file().read_text(encoding="utf-8"))
    assert parse_config(data, "defaults.toml") == Config()


def test_defaults_toml_names_every_setting():
    data = tomllib.loads(defaults_file().read_text(encoding="utf-8"))
    text = defaults_file().read_text(encoding="utf-8")
    for where, model in _models(Config):
        for name, field in model.model_fields.items():
            sub = field.annotation
            if any(isinstance(c, type) and issubclass(c, BaseModel)
                   for c in getattr(sub, "__args__", (sub,))):
                continue
            # optional settings (default None) are documented as a comment line
            assert name in text, f"{where}.{name} missing from configs/defaults.toml"
    assert "platforms" not in data  # absent on purpose: vocabulary = codes seen


def test_every_default_line_names_a_source():
    # each `key = value` line carries a comment (the source) or is explained right above
    lines = defaults_file().read_text(encoding="utf-8").splitlines()
    bare = [ln for i, ln in enumerate(lines)
            if "=" in ln and not ln.lstrip().startswith("#") and "#" not in ln
            and not lines[i - 1].lstrip().startswith("#")]
    assert bare == []


def test_unknown_key_gets_did_you_mean():
    with pytest.raises(ConfigError) as exc:
        parse_config({"switching": {"max_gap": 4}}, "study.toml")
    assert "did you mean 'max_gap_s'" in exc.value.message
    assert "study.toml" in exc.value.message


def test_unknown_section_gets_did_you_mean():
    with pytest.raises(ConfigError) as exc:
        parse_config({"arousel": {}}, "study.toml")
    assert "did you mean 'arousal'" in exc.value.message


def test_out_of_range_value_is_refused_with_its_value():
    with pytest.raises(ConfigError) as exc:
        parse_config({"switching": {"min_bout_s": 0}}, "study.toml")
    assert "switching.min_bout_s" in exc.value.message and "0" in exc.value.message


def test_unknown_time_zone_is_refused():
    with pytest.raises(ConfigError, match="Mars/Olympus"):
        parse_config({"study": {"timezone": "Mars/Olympus"}})


def test_toml_data_dir_is_relative_to_the_file(tmp_path):
    (tmp_path / "data").mkdir()
    cfg_file = tmp_path / "conf" / "s.toml"
    cfg_file.parent.mkdir()
    cfg_file.write_text('[study]\ndata_dir = "../data"\nname = "x"\n')
    folder, cfg, used = resolve_study(cfg_file)
    assert folder == (tmp_path / "data").resolve() and cfg.study.name == "x"


def test_folder_without_study_toml_uses_defaults(tmp_path):
    folder, cfg, used = resolve_study(tmp_path)
    assert cfg == Config() and used is None


def test_missing_target_is_a_config_error(tmp_path):
    with pytest.raises(ConfigError, match="no such study folder"):
        resolve_study(tmp_path / "nope")


def test_broken_toml_names_the_file(tmp_path):
    (tmp_path / "study.toml").write_text("[study\n")
    with pytest.raises(ConfigError, match="not valid TOML"):
        resolve_study(tmp_path)
