"""Charts draw what they are given (smoke tests on small tables; common practice, no source)."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd

from warranty_forecast.outputs import charts
from warranty_forecast.lifecore.data import LifeData
from warranty_forecast.lifecore.families import WEIBULL
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.stages.life_table import life_table


def matrix():
    rows = []
    for product in ("P", "Q"):
        for b in range(3):
            for k in range(1, 6 - b):
                rows.append((product, dt.date(2024, 1 + b, 1), k, 1000.0 - 10 * k, 2 + k, 0.0))
    frame = pd.DataFrame(rows, columns=["product", "build_month", "months_in_service", "units_at_risk", "returns", "units_withdrawn"])
    frame["return_rate"] = frame["returns"] / frame["units_at_risk"]
    return frame


def test_heatmap_has_one_panel_per_product():
    figure = charts.return_rate_heatmap(matrix())
    visible = [a for a in figure.axes if a.get_visible() and a.get_title()]
    assert [a.get_title() for a in visible] == ["P: returns per 1,000 at risk", "Q: returns per 1,000 at risk"]
    image = visible[0].images[0].get_array()
    assert image.shape == (3, 5) and np.ma.is_masked(image)  # later build months have no older cells


def test_probability_plot_draws_points_line_and_band():
    table = life_table(matrix())
    data = LifeData.from_monthly_returns([1, 2, 3, 4, 5], [12, 13, 12, 10, 6], [5.0], [4900.0])
    fit = Fitter(WEIBULL).fit(data)
    figure = charts.weibull_probability_plot(table, {"P": fit, "Q": None})
    panel_p = next(a for a in figure.axes if a.get_title() == "P")
    panel_q = next(a for a in figure.axes if a.get_title() == "Q")
    assert len(panel_p.lines) >= 2 and len(panel_p.collections) >= 1
    assert any("Weibull shape" in t.get_text() for t in panel_p.get_legend().get_texts())
    assert not any("Weibull shape" in t.get_text() for t in panel_q.get_legend().get_texts())


def test_expected_returns_chart_stacks_products_and_handles_empty():
    forecast = pd.DataFrame(
        {"product": ["P", "Q", "P"], "build_month": [dt.date(2024, 1, 1)] * 3,
         "month": [dt.date(2024, 5, 1), dt.date(2024, 5, 1), dt.date(2024, 6, 1)], "expected_returns": [1.0, 2.0, 3.0]}
    )
    figure = charts.expected_returns_by_month(forecast)
    heights = sorted(round(p.get_height(), 6) for p in figure.axes[0].patches)
    assert heights == [0.0, 1.0, 2.0, 3.0]
    empty = charts.expected_returns_by_month(forecast.iloc[0:0])
    assert "no forecast" in empty.axes[0].texts[0].get_text()
