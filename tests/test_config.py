"""Configuration: the documented defaults, validation messages, overrides."""

import tomllib
from pathlib import Path

import pytest

from prioritize.config import Config, config_from_dict, load_config, with_overrides
from prioritize.errors import ConfigError

DEFAULT_TOML = Path(__file__).resolve().parents[1] / "configs" / "default.toml"


def test_documented_defaults_are_the_built_in_ones():
    """configs/default.toml documents the dataclass defaults; the two must not drift."""
    with open(DEFAULT_TOML, "rb") as fh:
        raw = tomllib.load(fh)
    assert load_config(DEFAULT_TOML) == Config()
    assert set(raw) <= set(Config().to_dict())


@pytest.mark.parametrize("raw,message", [
    ({"planet": {"mass_jup": 1}}, "unknown key planet.mass_jup; allowed keys in [planet]"),
    ({"planets": {}}, "unknown section [planets]"),
    ({"planet": {"kind": "comet"}}, "planet.kind = 'comet' is not allowed; choose one of: gas_giant"),
    ({"thresholds": {"z_signature": 100}}, "thresholds.z_signature = 100.0 is outside the allowed range"),
    ({"scoring": {"samples_per_star": 2.5}}, "scoring.samples_per_star must be a whole number"),
    ({"observing": {"airmass": "high"}}, "observing.airmass must be a number"),
])
def test_bad_values_name_the_key_and_what_is_allowed(raw, message):
    with pytest.raises(ConfigError, match=message.replace("[", r"\[").replace("]", r"\]")
                       .replace("(", r"\(").replace(")", r"\)")):
        config_from_dict(raw)


def test_user_file_overlays_defaults_and_options_override(tmp_path):
    path = tmp_path / "mine.toml"
    path.write_text("[planet]\nmass_mjup = 5.0\n")
    cfg = load_config(path)
    assert cfg.planet.mass_mjup == 5.0 and cfg.planet.kind == "gas_giant"
    cfg = with_overrides(cfg, {"planet.mass_mjup": 2.0, "thresholds.z_signature": None})
    assert cfg.planet.mass_mjup == 2.0 and cfg.thresholds.z_signature == 3.0
    with pytest.raises(ConfigError, match="unknown option"):
        with_overrides(cfg, {"planet.radius": 1.0})
    bad = tmp_path / "bad.toml"
    bad.write_text("[planet\n")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(bad)
