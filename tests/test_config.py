"""The TOML config: unknown keys and wrong types name the key, file and line."""

from __future__ import annotations

import pytest

from mapdrift.config import load_config
from mapdrift.errors import ConfigError


def test_demo_config_parses():
    from conftest import DEMO

    cfg = load_config(DEMO / "demo.toml")
    assert cfg.section("inputs")["geometry"] == DEMO / "county_units.gpkg"
    assert cfg.section("classes")["k"] == 5


def test_unknown_key_names_line(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text('[inputs]\ngeometry = "a.gpkg"\n\n[classes]\nk = 5\nshceme = "quantile"\n')
    with pytest.raises(
        ConfigError, match=r"c.toml:6: key 'shceme' in \[classes\] is not a known key"
    ):
        load_config(p)


def test_wrong_type(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text('[classes]\nk = "five"\n')
    with pytest.raises(
        ConfigError, match=r"c.toml:2: key 'k' in \[classes\] should be a whole number"
    ):
        load_config(p)


def test_unknown_section_and_bad_toml(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text("[paint]\ncolour = 1\n")
    with pytest.raises(ConfigError, match=r"section \[paint\] is not known"):
        load_config(p)
    p.write_text("[inputs\n")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(p)


def test_values_checked_at_load(tmp_path):
    # out-of-range values stop when the file is read, naming the file and section
    p = tmp_path / "c.toml"
    p.write_text("[clusters]\nalpha = 1.5\n")
    with pytest.raises(ConfigError, match=r"c.toml: \[clusters\] --alpha must be between 0 and 1"):
        load_config(p)
    p.write_text("[classes]\nk = 12\n")
    with pytest.raises(ConfigError, match=r"\[classes\] k = 12 classes is out of range"):
        load_config(p)
    p.write_text('[inputs]\ngeometry = "a.gpkg"\nper = "1000"\n')
    with pytest.raises(ConfigError, match="key 'per' in \\[inputs\\] should be a number"):
        load_config(p)


def test_typos_get_a_suggestion_and_line(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text("[cluster]\nalpha = 0.1\n")
    with pytest.raises(
        ConfigError, match=r"c.toml:1: section \[cluster\] is not known; did you mean \[clusters\]"
    ):
        load_config(p)
    p.write_text("[clusters]\npermutatons = 99\n")
    with pytest.raises(ConfigError, match="did you mean 'permutations'"):
        load_config(p)


def test_set_overrides_any_key():
    from conftest import DEMO
    from mapdrift.config import parse_setting

    assert parse_setting("clusters.permutations=9999") == ("clusters", "permutations", 9999)
    assert parse_setting("animate.size=1920x1080") == ("animate", "size", "1920x1080")
    assert parse_setting('brief.formats=["html"]') == ("brief", "formats", ["html"])
    assert parse_setting("previous=outputs/2024") == ("run", "previous", "outputs/2024")
    cfg = load_config(DEMO / "demo.toml").with_values("animate", {"size": "1920x1080"})
    assert cfg.section("animate")["size"] == (1920, 1080)
    # the small-base hint tells `run` users to pass --set clusters.smooth=eb: it must be valid
    section, key, value = parse_setting("clusters.smooth=eb")
    assert (
        load_config(DEMO / "demo.toml")
        .with_values(section, {key: value})
        .section("clusters")["smooth"]
        == "eb"
    )
    # ... and so for the other hints that point `run` to a config key
    for text in ("clusters.islands=exclude", "changes.bridge_gaps=true", "animate.min_unit_px=3"):
        section, key, value = parse_setting(text)
        assert (
            load_config(DEMO / "demo.toml").with_values(section, {key: value}).section(section)[key]
        )
    with pytest.raises(ConfigError, match="SECTION.KEY=VALUE"):
        parse_setting("permutations")
