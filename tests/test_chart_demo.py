"""The charts drawn from the demo run's published tables (issue 12): what a reader sees on the demo, as of
2026-11-30 (the session's demo run, tests/conftest.py; common practice, no source)."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg

from warranty_forecast.outputs import charts

AS_OF = dt.date(2026, 11, 30)


@pytest.fixture(scope="module")
def demo_tables(demo_run_copy):
    names = ("forecast", "forecast_by_calendar_month", "reserve_by_product", "roll_forward")
    tables = {name: pd.read_parquet(demo_run_copy / f"{name}.parquet") for name in names}
    # published as calendar_month (outputs.output_columns); the chart functions take the run's frames (`month`)
    assert "calendar_month" in tables["forecast"] and "month" not in tables["forecast"]
    return {name: frame.rename(columns={"calendar_month": "month"}) for name, frame in tables.items()}


def test_demo_forecast_starts_after_the_as_of_line(demo_tables):
    forecast = demo_tables["forecast"]
    # issue 12: 2026-11 held expected returns although the month was over at the as-of date
    assert pd.to_datetime(forecast["month"]).min() == pd.Timestamp("2026-12-01")
    figure = charts.expected_returns_by_month(
        forecast, as_of_date=AS_OF, intervals=demo_tables["forecast_by_calendar_month"], costs=forecast,
        currency=charts.currency_of(demo_tables["reserve_by_product"]),
    )
    FigureCanvasAgg(figure).draw()
    counts = figure.axes[0]
    as_of = next(line for line in counts.lines if line.get_gid() == "as-of").get_xdata()[0]
    lines = [line for line in counts.lines if str(line.get_gid()).startswith("forecast:")]
    assert {line.get_gid() for line in lines} == {"forecast:QCP-140", "forecast:QDS-210", "forecast:QHT-360"}
    assert all(np.min(line.get_xdata()) > as_of for line in lines)
    bands = [c for c in counts.collections if str(c.get_gid()).startswith("band:")]
    assert len(bands) == 3
    # the lines add up to the published expected claims, the cost bars to the published expected cost
    assert sum(float(np.sum(line.get_ydata())) for line in lines) == pytest.approx(forecast["expected_claims"].sum())
    cost = sum(p.get_height() for p in figure.axes[1].patches)
    assert cost == pytest.approx(forecast["expected_cost"].sum())


def test_demo_finance_chart_adds_up_to_the_published_reserve(demo_tables):
    reserve, roll = demo_tables["reserve_by_product"], demo_tables["roll_forward"]
    figure = charts.reserve_for_finance(reserve, demo_tables["forecast"], roll, as_of_date=AS_OF,
                                        currency=charts.currency_of(reserve))
    FigureCanvasAgg(figure).draw()
    by_product, _, movement = figure.axes[:3]
    widths = sum(p.get_width() for p in by_product.patches if str(p.get_gid()).startswith("reserve-"))
    assert widths == pytest.approx(reserve["reserve"].sum(), abs=0.01)
    total = roll[roll["is_total"]].iloc[0]
    net = next(p for p in movement.patches if p.get_gid() == "movement:= net change").get_height()
    assert net == pytest.approx(total["closing_reserve"] - total["opening_reserve"], abs=0.005)
    assert f"{reserve['reserve'].sum():,.2f}" in figure._suptitle.get_text()
