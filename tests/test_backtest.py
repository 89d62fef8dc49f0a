"""The flagged build month's own life in the forecast, checked by a backtest on the demo, and the backtest
tool on hand-made output folders."""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path

import pandas as pd
import pytest

from warranty_forecast.config import load_config
from warranty_forecast.stages.build_month_alerts import alert_build_months
from warranty_forecast.stages.forecasting import forecast_returns
from warranty_forecast.stages.reporting_delay import reporting_delay_stage
from warranty_forecast.stages.life_models import fit_lives
from warranty_forecast.stages.shaping import shape_extracts
from warranty_forecast.tools.backtest import BACKTEST_COLUMNS, backtest, main

ROOT = Path(__file__).resolve().parents[1]
PLANTED = dt.date(2025, 2, 1)


def _stages(tmp_path: Path, as_of: dt.date):
    """The run's stages up to the forecast at `as_of` on the demo extracts (no charts, nothing published)."""
    config = load_config(
        shipments_path=ROOT / "data_demo" / "shipments.parquet", claims_path=ROOT / "data_demo" / "claims.csv",
        out_dir=tmp_path / f"out-{as_of}", run_date=dt.date(2026, 12, 2), as_of_date=as_of,
    )
    shaped = shape_extracts(config)
    delays = reporting_delay_stage(shaped, config.forecast, config.life_model)  # as run.run_nightly does
    screening = fit_lives(delays.shaped, config.life_model)
    alerts = alert_build_months(shaped.fit_returns, shaped.fit_suspensions, screening, config.alerts, config.life_model)
    lives = fit_lives(delays.shaped, config.life_model, left_out=alerts.flagged_by_product)
    forecast = forecast_returns(
        delays.shaped, lives, config.life_model, flagged=alerts.flagged_by_product,
        unreported_by_claim_month=delays.unreported_by_claim_month,
    )
    return shaped, alerts, lives, forecast


def test_the_planted_month_forecast_at_mid_2025_is_near_what_came(tmp_path):
    # Backtest on the demo (the check): at as-of 2025-06-30 build month 2025-02 of QCP-140 had 119
    # returns; the product's model alone forecast about 56 for the next 12 months. The returns that came
    # in those months are the change in its returns to date between as-of 2025-06-30 and 2026-06-30: 212
    # (the issue counted 204 by another route). The planted defect (data_demo/README.md): 4% of the
    # month's units with an exponential life of mean 4 months.
    shaped_then, alerts, lives, forecast = _stages(tmp_path, dt.date(2025, 6, 30))
    shaped_later, *_ = _stages(tmp_path, dt.date(2026, 6, 30))
    assert PLANTED in alerts.flagged_by_product["QCP-140"]
    assert lives.table.set_index("product").loc["QCP-140", "build_months_left_out"].split(", ")[-1] == "2025-02"
    months = pd.to_datetime(forecast.by_month["month"])
    window = forecast.by_month[
        (forecast.by_month["product"] == "QCP-140") & (forecast.by_month["build_month"] == PLANTED)
        & (months > pd.Timestamp("2025-06-30")) & (months <= pd.Timestamp("2026-06-30"))
    ]
    own_life, product_model = window["expected_returns"].sum(), window["expected_returns_product_model"].sum()

    def returns_to_date(shaped):
        summary = shaped.cohort_summary.set_index(["product", "build_month"])
        return int(summary.loc[("QCP-140", PLANTED), "returns_to_date"])

    came = returns_to_date(shaped_later) - returns_to_date(shaped_then)
    assert came == 212
    assert product_model == pytest.approx(56.0, abs=1.0)
    # measured: 296.0 (the day grid of ages, the reporting-delay correction and the sale dates imputed given
    # the unit may be unsold; 303.0 before them, with a defective share of 6.5% and a mean defect life of
    # 8.4 months) (the data's
    # four months leave the defect life loosely pinned: a mean life of 4 months is within 1 log-likelihood unit)
    assert abs(own_life - came) < 0.75 * abs(product_model - came)
    assert own_life == pytest.approx(296.0, abs=1.0)
    lives_table = forecast.flagged_month_lives.set_index(["product", "build_month"])
    assert lives_table.loc[("QCP-140", PLANTED), "life_model"] == "defective share"


def _write_run(folder: Path, as_of: str, forecast: pd.DataFrame, reserve: pd.DataFrame, flagged=()) -> Path:
    folder.mkdir()
    (folder / "manifest.json").write_text(json.dumps({"as_of_date": as_of}), encoding="utf-8")
    forecast.to_parquet(folder / "forecast.parquet")
    reserve.to_parquet(folder / "reserve.parquet")
    pd.DataFrame({
        "product": [p for p, _ in flagged], "build_month": [m for _, m in flagged], "is_flagged": [True] * len(flagged),
    }).to_parquet(folder / "build_month_alerts.parquet")
    return folder


@pytest.mark.parametrize("month_name", ["calendar_month", "month"])  # published now; a folder from before the rename
def test_the_backtest_sums_the_forecast_window_and_differences_returns_to_date(tmp_path, capsys, month_name):
    # hand-made: forecast for 2025-07 .. 2025-09 made at as-of 2025-06-30; the later run is at 2025-08-31,
    # so 2025-07 and 2025-08 count (3 + 4 = 7 and 1 + 1 = 2 under the product model) and 2025-09 does not
    january, february = dt.date(2025, 1, 1), dt.date(2025, 2, 1)
    forecast = pd.DataFrame({
        "product": ["P"] * 4, "build_month": [january, january, january, february],
        month_name: [dt.date(2025, 7, 1), dt.date(2025, 8, 1), dt.date(2025, 9, 1), dt.date(2025, 7, 1)],
        "expected_returns": [3.0, 4.0, 5.0, 2.0], "expected_returns_product_model": [1.0, 1.0, 1.0, 2.0],
    })
    earlier = _write_run(tmp_path / "a", "2025-06-30", forecast, pd.DataFrame({
        "product": ["P", "P"], "build_month": [january, february], "returns_to_date": [10, 4]}), flagged=[("P", january)])
    later = _write_run(tmp_path / "b", "2025-08-31", forecast.iloc[:0], pd.DataFrame({
        "product": ["P", "P", "P"], "build_month": [january, february, dt.date(2025, 7, 1)],
        "returns_to_date": [18, 5, 3]}))
    table = backtest(earlier, later)
    assert list(table.columns) == list(BACKTEST_COLUMNS)
    assert table.to_dict("records") == [
        {"product": "P", "build_month": january, "is_flagged": True, "forecast": 7.0, "forecast_product_model": 2.0,
         "came": 8},
        {"product": "P", "build_month": february, "is_flagged": False, "forecast": 2.0, "forecast_product_model": 2.0,
         "came": 1},
    ]
    assert main([str(earlier), str(later)]) == 0
    printed = capsys.readouterr().out
    assert "2025-01-01" in printed and "2025-02-01" not in printed.split("product totals")[0]
    assert main([str(later), str(earlier)]) == 1  # the later run must be later


def test_a_forecast_holding_both_month_names_is_refused(tmp_path, capsys):
    january = dt.date(2025, 1, 1)
    forecast = pd.DataFrame({"product": ["P"], "build_month": [january], "month": [dt.date(2025, 7, 1)],
                             "calendar_month": [dt.date(2025, 7, 1)], "expected_returns": [1.0]})
    reserve = pd.DataFrame({"product": ["P"], "build_month": [january], "returns_to_date": [1]})
    earlier = _write_run(tmp_path / "a", "2025-06-30", forecast, reserve)
    later = _write_run(tmp_path / "b", "2025-08-31", forecast.iloc[:0], reserve)
    assert main([str(earlier), str(later)]) == 1
    assert "holds both 'month' and 'calendar_month'" in capsys.readouterr().err
