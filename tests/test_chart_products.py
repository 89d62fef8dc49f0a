"""Which product lines the per-product charts draw when there are many (issue 11): flagged ones first, then
the largest reserves, at most charts.max_products; the rest stay in the tables (common practice, no source)."""

from __future__ import annotations

import math

import pandas as pd
import pytest

from warranty_forecast.cli import main
from warranty_forecast.outputs import charts

from small_scenario import write_small_extracts


def test_flagged_products_first_then_the_largest_reserves():
    alerts = pd.DataFrame({
        "product": ["A", "A", "B", "C", "D"], "is_flagged": [False, True, False, True, False],
        "month_q_value": [0.5, 0.01, 0.4, 0.001, 0.9],
    })
    reserve = pd.DataFrame({"product": ["A", "B", "C", "D", "E"], "reserve": [10.0, 500.0, 1.0, math.nan, 50.0]})
    products = ["E", "D", "C", "B", "A"]
    assert charts.products_to_draw(alerts, reserve, products, 10) == ["C", "A", "B", "E", "D"]
    assert charts.products_to_draw(alerts, reserve, products, 3) == ["C", "A", "B"]
    assert charts.products_to_draw(alerts.iloc[0:0], reserve.iloc[0:0], products, 2) == ["A", "B"]
    with pytest.raises(ValueError, match="limit"):
        charts.products_to_draw(alerts, reserve, products, 0)
    # charts.products: named lines first in their order, then the usual order; unknown names are skipped, and
    # all named lines are drawn even beyond the limit
    assert charts.products_to_draw(alerts, reserve, products, 3, first=["E", "X", "D"]) == ["E", "D", "C"]
    assert charts.products_to_draw(alerts, reserve, products, 1, first=["E", "D"]) == ["E", "D"]
    assert charts.unknown_chart_products(["E", "X", "Y"], products) == (
        "charts.products names X, Y: not a product line of the extracts; no chart for it",
    )
    assert charts.unknown_chart_products(["E"], products) == ()


def test_the_note_names_the_products_drawn_only_when_some_are_left_out():
    assert charts.charted_note(["A", "B"], 2) == ""
    note = charts.charted_note(["B"], 2)
    assert note.startswith("The per-product charts show 1 of 2 product lines") and note.endswith("in the tables.")


def test_expected_returns_chart_sums_the_other_products_into_one_band():
    forecast = pd.DataFrame({
        "product": ["A", "B", "C", "A", "B", "C"],
        "month": pd.to_datetime(["2025-01-01"] * 3 + ["2025-02-01"] * 3).date,
        "expected_returns": [1.0, 2.0, 3.0, 4.0, 5.0, 6.0],
    })
    figure = charts.expected_returns_by_month(forecast, ["B"])
    legend = [text.get_text() for text in figure.axes[0].get_legend().get_texts()]
    assert legend == ["B", "2 other products", "expected"]
    values = {line.get_gid(): list(line.get_ydata()) for line in figure.axes[0].lines}
    assert values == {"forecast:B": [2.0, 5.0], "forecast:2 other products": [4.0, 10.0]}  # the others: 1 + 3, 4 + 6


def test_a_run_with_more_products_than_the_cap_says_which_are_drawn(tmp_path):
    shipments, claims = write_small_extracts(tmp_path)
    config = tmp_path / "settings.toml"
    # P2 named first (the flagged-then-reserve order alone would pick by reserve), NOPE is no product line
    config.write_text('[charts]\nmax_products = 1\nproducts = ["P2", "NOPE"]\n[forecast]\nprediction_draws = 200\n')
    out = tmp_path / "out"
    assert main(["run", "--shipments", str(shipments), "--claims", str(claims), "--out", str(out),
                 "--config", str(config)]) == 0
    report = (out / "latest" / "report.md").read_text(encoding="utf-8")
    assert "The per-product charts show 1 of 2 product lines" in report
    assert "charts.max_products): P2." in report
    assert "charts.products names NOPE: not a product line of the extracts" in report
    page = (out / "latest" / "report.html").read_text(encoding="utf-8")
    assert "The per-product charts show 1 of 2 product lines" in page
