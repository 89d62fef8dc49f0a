"""The TOML configuration: defaults, every key, and clear errors (common practice, no source)."""

from __future__ import annotations

import dataclasses
import datetime as dt
from pathlib import Path

import pytest

from warranty_forecast.config import check_products_in_data, load_config, parse_date
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
    assert config.run.max_data_gap_days == 7 and config.run.max_quarantined_share == 0.05
    assert config.warranty.max_months == 240 and config.shipments.max_units_per_row == 1_000_000_000
    assert config.run_date == dt.date.today()


def test_run_and_limit_keys(tmp_path):
    config = config_from(
        tmp_path,
        """
[run]
max_data_gap_days = 0
max_quarantined_share = 1
[warranty]
default_months = 36
max_months = 60
[shipments]
max_units_per_row = 5_000
""",
    )
    assert (config.run.max_data_gap_days, config.run.max_quarantined_share) == (0, 1.0)
    assert (config.warranty.default_months, config.warranty.max_months) == (36, 60)
    assert config.shipments.max_units_per_row == 5000


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
        ("[run]\nmax_quarantined_share = 1.5\n", r"run\.max_quarantined_share must be a number in \[0, 1\]"),
        ("[run]\nmax_quarantined_share = -0.1\n", "max_quarantined_share"),
        ("[run]\nmax_data_gap_days = -1\n", r"run\.max_data_gap_days must be an integer >= 0"),
        ("[run]\nmax_gap = 3\n", r"unknown key.*run\.max_gap"),
        ("[warranty]\nmax_months = 2000000000\n", r"warranty\.max_months must be an integer <= 1_200"),
        ("[warranty]\ndefault_months = 300\n", r"warranty\.default_months must be an integer <= 240"),
        ("[shipments]\nmax_units_per_row = 10_000_000_000\n", r"max_units_per_row must be an integer <= 1_000_000_000"),
        ("[shipments]\nmax_units_per_row = 0\n", r"max_units_per_row must be an integer >= 1"),
        ("[charts]\nproducts = 'QCP-140'\n", r"charts\.products must be a list of at most 200 product names"),
        ("[charts]\nproducts = ['QCP-140', 3]\n", r"charts\.products must be a list"),
        ("[charts]\nproducts = ['  ']\n", r"charts\.products must be a list"),
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


def test_as_of_date_after_the_run_date_is_an_error(tmp_path):
    with pytest.raises(ConfigError, match=r"--as-of 2026-01-02 is after the run date 2026-01-01"):
        load_config(
            shipments_path=Path("s"), claims_path=Path("c"), out_dir=tmp_path,
            as_of_date=dt.date(2026, 1, 2), run_date=dt.date(2026, 1, 1),
        )
    same_day = load_config(
        shipments_path=Path("s"), claims_path=Path("c"), out_dir=tmp_path,
        as_of_date=dt.date(2026, 1, 1), run_date=dt.date(2026, 1, 1),
    )
    assert same_day.as_of_date == same_day.run_date


def test_config_file_that_is_not_utf8_is_a_config_error(tmp_path):
    path = tmp_path / "settings.toml"
    path.write_bytes("[reserve.cost_per_claim_by_product]\n\"Küche\" = 90.0\n".encode("latin-1"))
    with pytest.raises(ConfigError, match=r"settings\.toml is not UTF-8 text \(byte 0xfc at position 38\)"):
        load_config(shipments_path=Path("s"), claims_path=Path("c"), out_dir=tmp_path, config_path=path)


def test_per_product_keys_must_name_products_in_the_data(tmp_path):
    products = ["QCP-140", "QDS-210", "QHT-360"]
    config = config_from(tmp_path, "[reserve.cost_per_claim_by_product]\nQDS-210 = 90.0\n"
                                   "[life_model.fixed_shape_by_product]\nQHT-360 = 2.5\n")
    check_products_in_data(config, products)  # both known: no error
    typo = config_from(tmp_path, "[reserve.cost_per_claim_by_product]\nQDS-201 = 90.0\n")
    with pytest.raises(ConfigError, match=(
        r"settings\.toml: reserve\.cost_per_claim_by_product\.QDS-201 names a product that is not in the"
        r" shipments extract; did you mean 'QDS-210'\?"
    )):
        check_products_in_data(typo, products)
    shape_typo = config_from(tmp_path, "[life_model.fixed_shape_by_product]\nqht360 = 2.5\n")
    with pytest.raises(ConfigError, match=r"life_model\.fixed_shape_by_product\.qht360 .*did you mean 'QHT-360'"):
        check_products_in_data(shape_typo, products)


def test_a_run_with_a_per_product_key_for_an_unknown_product_stops_before_publishing(tmp_path):
    from warranty_forecast.run import run_nightly

    shipments = tmp_path / "shipments.csv"
    claims = tmp_path / "claims.csv"
    shipments.write_text("product,build_month,ship_date\nPUMP-1,2024-01,2024-01-10\n")
    claims.write_text("claim_id,product,build_month,failure_date,claim_date,cost\nK1,PUMP-1,2024-01,2024-03-01,2024-03-02,10\n")
    settings = tmp_path / "settings.toml"
    settings.write_text("[reserve.cost_per_claim_by_product]\nPUMP-2 = 90.0\n")
    out = tmp_path / "out"
    config = load_config(
        shipments_path=shipments, claims_path=claims, out_dir=out, config_path=settings, run_date=dt.date(2024, 3, 5)
    )
    with pytest.raises(ConfigError, match=r"cost_per_claim_by_product\.PUMP-2 .*did you mean 'PUMP-1'"):
        run_nightly(config)
    assert not out.exists()


def test_settings_round_trip_through_their_document(tmp_path):
    # every key is declared once (a settings field); the manifest's copy parses back to the same settings
    from warranty_forecast.config import SECTIONS, settings_as_document, settings_from_document

    config = config_from(
        tmp_path,
        "[reserve]\ncost_per_claim = 12.5\n[reserve.cost_per_claim_by_product]\nA = 3.0\n"
        "[life_model]\nfixed_shape = 1.5\ngoodness_of_fit_warning_p_value = 0.01\n"
        "[life_model.fixed_shape_by_product]\nB = 2.0\n[claims]\ncounted_statuses = ['approved', 'rejected']\n",
    )
    document = settings_as_document(config)
    assert set(document) == set(SECTIONS)
    for name, settings in SECTIONS.items():
        assert set(document[name]) == {item.name for item in dataclasses.fields(settings)}
    parsed = settings_from_document(
        {name: {k: v for k, v in table.items() if v is not None} for name, table in document.items()}, "round trip"
    )
    assert all(parsed[name] == getattr(config, name) for name in SECTIONS)
    assert config.life_model.goodness_of_fit_warning_p_value == 0.01


def test_chart_products_keep_their_order_once_each(tmp_path):
    config = config_from(tmp_path, "[charts]\nproducts = ['QHT-360', 'QCP-140', 'QHT-360']\n")
    assert config.charts.products == ("QHT-360", "QCP-140")
    assert config_from(tmp_path, "").charts.products == ()


def test_safety_terms_default_custom_and_off(tmp_path):
    # the default holds the five words as word beginnings (common practice, no source)
    assert config_from(tmp_path, None).alerts.safety_terms == ("overheat", "smok", "fire", "burn", "shock")
    custom = config_from(tmp_path, "[alerts]\nsafety_terms = ['Fire', 'SPARK', 'fire', 'Überhitz']\n")
    assert custom.alerts.safety_terms == ("fire", "spark", "überhitz")  # lower case, each once, order kept
    assert config_from(tmp_path, "[alerts]\nsafety_terms = []\n").alerts.safety_terms == ()  # the listing off


@pytest.mark.parametrize(
    "value",
    [
        "'fire'",  # not a list
        "['fire', 3]",  # not text
        "['']", "['ab']",  # too short: would match half the codes
        "['" + "a" * 41 + "']",  # too long
        "['over heat']", "['burn_mark']", "['fire1']",  # a separator or digit could never match a word
        "[" + ", ".join(f"'term{chr(97 + i // 26)}{chr(97 + i % 26)}'" for i in range(51)) + "]",  # 51 terms
    ],
)
def test_invalid_safety_terms_raise_config_error(tmp_path, value):
    with pytest.raises(ConfigError, match=r"alerts\.safety_terms must be a list of at most 50 terms, each 3 to 40"):
        config_from(tmp_path, f"[alerts]\nsafety_terms = {value}\n")
