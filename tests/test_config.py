"""The TOML configuration: defaults, every key, and clear errors (common practice, no source)."""

from __future__ import annotations

from pathlib import Path

import pytest

from warranty_forecast.config import load_config, parse_date
from warranty_forecast.errors import ConfigError


def config_from(tmp_path: Path, text: str | None):
    path = None
    if text is not None:
        path = tmp_path / "settings.toml"
        path.write_text(text)
    return load_config(shipments_path=Path("s.csv"), claims_path=Path("c.csv"), out_dir=tmp_path, config_path=path)


def test_defaults_without_a_file(tmp_path):
    config = config_from(tmp_path, None)
    assert config.warranty.default_months == 24
    assert config.claims.counted_statuses == ("approved",)
    assert config.reserve.cost_per_claim is None and config.reserve.cost_window_months == 12
    assert config.life_model.confidence_level == 0.95 and config.life_model.min_returns == 5


def test_every_key(tmp_path):
    config = config_from(
        tmp_path,
        """
[warranty]
default_months = 12
[claims]
counted_statuses = ["approved", "no_fault_found"]
[reserve]
cost_per_claim = 50
cost_window_months = 6
[reserve.cost_per_claim_by_product]
X1 = 70.5
[life_model]
confidence_level = 0.9
min_returns = 20
""",
    )
    assert config.warranty.default_months == 12
    assert config.claims.counted_statuses == ("approved", "no_fault_found")
    assert config.reserve.override_for("X1") == 70.5
    assert config.reserve.override_for("other") == 50.0
    assert config.reserve.cost_window_months == 6
    assert config.life_model.confidence_level == 0.9 and config.life_model.min_returns == 20


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("[warranty]\ndefault_monthz = 1\n", "unknown key.*warranty.default_monthz"),
        ("[extra]\n", "unknown key.*extra"),
        ("[warranty]\ndefault_months = 0\n", "default_months must be an integer >= 1"),
        ("[claims]\ncounted_statuses = ['lost']\n", "counted_statuses"),
        ("[reserve]\ncost_per_claim = -1\n", "cost_per_claim must be a number >= 0"),
        ("[life_model]\nconfidence_level = 1.5\n", "confidence_level"),
        ("not toml ===", "not valid TOML"),
    ],
)
def test_invalid_settings_raise_config_error(tmp_path, text, message):
    with pytest.raises(ConfigError, match=message):
        config_from(tmp_path, text)


def test_missing_config_file_and_bad_date(tmp_path):
    with pytest.raises(ConfigError, match="does not exist"):
        load_config(shipments_path=Path("s"), claims_path=Path("c"), out_dir=tmp_path, config_path=tmp_path / "no.toml")
    with pytest.raises(ConfigError, match="--as-of"):
        parse_date("2026-02-30", "--as-of")
