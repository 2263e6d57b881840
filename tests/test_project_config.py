"""Settings: JSON Schema validation with messages that name key, file and line."""

from __future__ import annotations

import pytest

from wavetrail.config import config_schema, default_config, load_config, validate_config
from wavetrail.errors import ConfigError


def _walk(schema, path=()):
    for key, sub in schema.get("properties", {}).items():
        yield path + (key,), sub
        yield from _walk(sub, path + (key,))


def test_every_key_has_a_description_and_a_default():
    schema = config_schema()
    assert schema["additionalProperties"] is False
    keys = list(_walk(schema))
    assert len(keys) > 25
    for path, sub in keys:
        assert sub.get("description"), path
        assert "default" in sub, path
        if sub.get("type") == "object":
            assert sub.get("additionalProperties") is False, path


def test_defaults_fill_every_section():
    config = default_config()
    assert config["seed"] == 20261202
    assert config["forest"]["trees"] == 500
    assert config["forest"]["shards"] == 1
    assert config["growth"]["shapes"] == ["linear", "quadratic"]
    assert config["invariance"]["scales"] == "all"
    assert config["report"]["min_cell"] == 5
    # a given value wins over the default, the rest is filled
    partial = validate_config({"forest": {"trees": 50}})
    assert partial["forest"]["trees"] == 50 and partial["forest"]["shards"] == 1
    # the defaults themselves are valid
    assert validate_config(default_config()) == default_config()


def test_unknown_key_is_named_with_its_line_and_a_suggestion(tmp_path):
    path = tmp_path / "config.yaml"
    path.write_text("data: [data/raw/a.csv]\nseed: 1\nforest:\n  trees: 10\n  shard: 2\n", encoding="utf-8")
    with pytest.raises(ConfigError) as info:
        load_config(path)
    text = str(info.value)
    assert "unknown key 'forest.shard'" in text
    assert f"{path}, line 5" in text
    assert "did you mean 'forest.shards'" in text


def test_mistyped_value_is_named_with_what_is_allowed(tmp_path):
    path = tmp_path / "config.yaml"
    path.write_text("seed: twelve\ngrowth:\n  residuals: loose\n", encoding="utf-8")
    with pytest.raises(ConfigError) as info:
        load_config(path)
    text = str(info.value)
    assert "2 problems" in text
    assert "line 1" in text and "'seed'" in text and "whole number" in text
    assert "line 3" in text and "'growth.residuals'" in text and "free, equal" in text


def test_malformed_yaml_names_file_and_line(tmp_path):
    path = tmp_path / "config.yaml"
    path.write_text("data: [data/raw/a.csv]\nforest:\n  trees: 10\n   shards: 2\n", encoding="utf-8")
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert f"{path}, line 4" in str(info.value)


def test_settings_must_be_a_mapping(tmp_path):
    path = tmp_path / "config.yaml"
    path.write_text("- a\n- b\n", encoding="utf-8")
    with pytest.raises(ConfigError, match="mapping"):
        load_config(path)


def test_empty_file_means_all_defaults(tmp_path):
    path = tmp_path / "config.yaml"
    path.write_text("# nothing set\n", encoding="utf-8")
    assert load_config(path) == default_config()


def test_every_key_is_documented_in_the_project_layout_page():
    from pathlib import Path

    page = (Path(__file__).resolve().parents[1] / "docs" / "project-layout.md").read_text()
    missing = []
    for path, sub in _walk(config_schema()):
        if sub.get("type") != "object" and f"`{'.'.join(path)}`" not in page:
            missing.append(".".join(path))
    assert missing == [], f"add these keys to docs/project-layout.md: {missing}"
