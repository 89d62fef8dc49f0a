"""Charts draw what they are given (smoke tests on small tables; common practice, no source), and the
heat map's exposure, rates and expected returns are right on tiny hand-made cases (hand computation)."""

from __future__ import annotations

import datetime as dt
import io
import math
import re
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

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


def test_probability_plot_draws_points_line_and_band():
    table = life_table(matrix())
    data = LifeData.from_monthly_returns([1, 2, 3, 4, 5], [12, 13, 12, 10, 6], [5.0], [4900.0], day_grid=False)
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


# -- the build-month charts (issue 8) -----------------------------------------------------------------

YYYY_MM = re.compile(r"^\d{4}-\d{2}$")


def suspensions(rows, warranty_months=24):
    """fit_suspensions from (product, build_month, observed_age_months, units); one sale month per build month."""
    frame = pd.DataFrame(rows, columns=["product", "build_month", "observed_age_months", "units"])
    return frame.assign(
        sale_month=frame["build_month"], warranty_months=warranty_months, warranty_start_date=frame["build_month"],
        suspensions=frame["units"].astype(float),
    )


def returns_table(rows, warranty_months=24):
    """fit_returns from (product, build_month, months_in_service, returns), in the same sale-month groups."""
    frame = pd.DataFrame(rows, columns=["product", "build_month", "months_in_service", "returns"])
    return frame.assign(sale_month=frame["build_month"], warranty_months=warranty_months)


class Exponential:
    """A baseline with F(t) = 1 - exp(-t / mean)."""

    def __init__(self, mean):
        self.mean = mean

    def cdf(self, t):
        return 1.0 - np.exp(-np.asarray(t, dtype=float) / self.mean)


JAN, FEB, MAR = dt.date(2024, 1, 1), dt.date(2024, 2, 1), dt.date(2024, 3, 1)
L = 365.25 / 12  # days in a month of age. Months in service on the day grid (hand arithmetic): month 1 is
# ages (0, 31] days, month 2 (31, 61], month 3 (61, 92], month 4 (92, 122] (lifecore.data.month_interval_ends)


def age(days):
    """An observed age of whole days, in months (as the pipeline computes it)."""
    return days / L


def test_exposure_counts_the_newest_month_by_the_time_it_was_observed():
    # 1,000 units observed to 75 days: months 1 and 2 fully (31 and 30 days), month 3 for 14 of its 31 days
    # (hand computation; unit-months = units x days / L)
    exposure = charts.exposure_by_month_in_service(suspensions([("P", JAN, age(75), 1000)]))
    assert exposure["months_in_service"].tolist() == [1, 2, 3]
    assert exposure["exposure_unit_months"].tolist() == pytest.approx([1000 * 31 / L, 1000 * 30 / L, 1000 * 14 / L])
    cells = charts.return_rate_cells(returns_table([("P", JAN, 3, 1)]), suspensions([("P", JAN, age(75), 1000)]))
    month_3 = cells[cells["months_in_service"] == 3].iloc[0]
    # 1 return on 460 unit-months is 2.17 per 1,000 unit-months, not 1 per 1,000 units (hand computation)
    assert month_3["rate_per_1000_unit_months"] == pytest.approx(1000 / (1000 * 14 / L))
    assert cells["rate_per_1000_unit_months"].tolist() == pytest.approx([0.0, 0.0, L / 14])


def test_exposure_takes_out_units_returned_in_earlier_months():
    # one sale-month group of 1,000 units: 600 observed to 92 days (the end of month 3), 400 to 45 days;
    # 10 returns in month 1 and 5 in month 2, shared in proportion to units (hand computation, in unit-days
    # then / L):
    #   month 1: (600 + 400) x 31                             = 31,000
    #   month 2: (600 x 30 + 400 x 14) x (1 - 10 / 1000)      = 23,364
    #   month 3: 600 x 31 x (1 - 15 / 1000)                   = 18,321
    units = suspensions([("P", JAN, age(92), 600), ("P", JAN, age(45), 400)])
    returned = returns_table([("P", JAN, 1, 10), ("P", JAN, 2, 5)])
    exposure = charts.exposure_by_month_in_service(units, returned)
    assert exposure["exposure_unit_months"].tolist() == pytest.approx([31_000 / L, 23_364 / L, 18_321 / L])
    assert charts.exposure_by_month_in_service(units)["exposure_unit_months"].tolist() == pytest.approx(
        [31_000 / L, 23_600 / L, 18_600 / L]
    )


def test_expected_returns_per_cell_add_up_to_the_whole_window():
    # units x (F(min(a, b_k)) - F(b_{k-1})) per month; the months add up to units x F(a), the alert stage's E
    # (hand computation with the closed form of an exponential cdf; month ends 31, 61 days, a = 75 days)
    baseline = Exponential(100.0)
    cells = charts.return_rate_cells(
        returns_table([("P", JAN, 3, 4)]), suspensions([("P", JAN, age(75), 1000)]), {"P": baseline}
    )
    f = lambda days: 1.0 - math.exp(-days / L / 100.0)  # noqa: E731
    assert cells["expected_returns"].tolist() == pytest.approx(
        [1000 * f(31), 1000 * (f(61) - f(31)), 1000 * (f(75) - f(61))]
    )
    assert cells["expected_returns"].sum() == pytest.approx(1000 * f(75))
    assert cells["observed_to_expected"].iloc[2] == pytest.approx(4 / (1000 * (f(75) - f(61))))
    assert cells["observed_to_expected"].iloc[0] == 0.0  # no returns where some were expected
    no_baseline = charts.return_rate_cells(returns_table([("P", JAN, 3, 4)]), suspensions([("P", JAN, age(75), 1000)]))
    assert no_baseline["expected_returns"].isna().all() and no_baseline["observed_to_expected"].isna().all()


def test_thin_cells_are_marked():
    # 1,000 units to 62 days: month 3 has 1 day, 33 unit-months, under MIN_EXPOSURE_UNIT_MONTHS = 100
    # (hand computation)
    assert charts.MIN_EXPOSURE_UNIT_MONTHS == 100.0
    cells = charts.return_rate_cells(returns_table([]), suspensions([("P", JAN, age(62), 1000)]), {"P": Exponential(10.0)})
    assert cells["exposure_unit_months"].tolist() == pytest.approx([31_000 / L, 30_000 / L, 1_000 / L])
    assert cells["is_thin"].tolist() == [False, False, True]
    # the ratio also needs MIN_EXPECTED_RETURNS = 1: 1000 x (F(62 days) - F(61 days)) = 2.7 expected is
    # enough, but the cell is already thin
    assert cells["is_ratio_thin"].tolist() == [False, False, True]


def heat_map_inputs():
    """P: three build months (Jan to 106 days, half of month 4, with returns; Feb to 75 days with no returns;
    Mar to 32 days: month 2 thin); "$x$": one build month; E: units not yet in service (age 0)."""
    units = suspensions([
        ("P", JAN, age(106), 1000), ("P", FEB, age(75), 1000), ("P", MAR, age(32), 1000),
        ("$x$", JAN, age(60), 500), ("E", JAN, 0.0, 300),
    ])
    returned = returns_table([("P", JAN, 1, 3), ("P", JAN, 3, 2), ("P", JAN, 4, 1), ("$x$", JAN, 2, 1)])
    return returned, units


def test_heatmap_rates_per_unit_month_with_ratios_masks_and_labels():
    returned, units = heat_map_inputs()
    figure = charts.return_rate_heatmap(returned, units, {"P": Exponential(300.0), "$x$": None})
    figure.savefig(io.BytesIO(), format="png", dpi=30)  # "$x$" is drawn literally, not as math markup
    titles = [a.get_title() for a in figure.axes if a.get_visible() and a.get_title()]
    assert titles == [  # products side by side: rates in the top row, observed / expected below
        r"\$x\$: returns per 1,000 unit-months", "E", "P: returns per 1,000 unit-months",
        r"\$x\$", "E", "P: observed / expected (baseline)",
    ]
    rate_axis = next(a for a in figure.axes if a.get_title() == "P: returns per 1,000 unit-months")
    rates = rate_axis.images[0].get_array()
    # rows Jan, Feb, Mar; months in service 1..4 (hand computation: returns x 1,000 / unit-months, with
    # unit-months = units at risk x days observed in the month / L)
    assert rates[0, 0] == pytest.approx(3.0 / (1000 * 31 / L) * 1000)
    assert rates[0, 2] == pytest.approx(2.0 / (997 * 31 / L) * 1000)
    assert rates[0, 3] == pytest.approx(1.0 / (995 * 14 / L) * 1000)  # the newest half month of January
    assert rates[1].tolist()[:3] == [0.0, 0.0, 0.0]  # February: no returns, still drawn
    assert np.ma.is_masked(rates[2, 1])  # March month 2: 1 day, 33 unit-months, thin
    assert np.ma.is_masked(rates[2, 2])  # March month 3: not yet observed
    hatched = [c for c in rate_axis.collections if c.get_hatch()]
    assert len(hatched) == 1 and len(hatched[0].get_paths()) == 1  # only the thin cell is hatched
    labels = {a.get_ylabel() for a in figure.axes}
    assert {"returns per 1,000 unit-months", "observed / expected returns (log scale)"} <= labels
    ticks = [t.get_text() for t in rate_axis.get_yticklabels()]
    assert ticks == ["2024-01", "2024-02", "2024-03"]  # up to 24 build months: every month
    assert "100 unit-months" in figure.get_suptitle()
    ratio_axis = next(a for a in figure.axes if a.get_title() == "P: observed / expected (baseline)")
    ratios = ratio_axis.images[0].get_array()
    # January month 1: 3 returns against 1000 x F(31 days) of an exponential of mean 300 months (hand computation)
    assert ratios[0, 0] == pytest.approx(3 / (1000 * (1 - math.exp(-31 / L / 300))))
    assert ratios[1, 0] < 1 / charts.OBSERVED_TO_EXPECTED_COLOUR_LIMIT  # no returns: the colour bar's lower end
    assert ratio_axis.images[0].get_cmap().name == "RdBu_r" and ratio_axis.images[0].norm.vmin == pytest.approx(0.1)
    empty = [a for a in figure.axes if a.get_title() == "E"]
    assert all("no units observed in service" in a.texts[0].get_text() for a in empty)
    no_baseline = next(a for a in figure.axes if a.get_title() == r"\$x\$")
    assert "no baseline" in no_baseline.texts[0].get_text()


def test_heatmap_without_baselines_has_one_row_and_long_histories_get_quarterly_ticks():
    months = [dt.date(2022 + (m - 1) // 12, (m - 1) % 12 + 1, 1) for m in range(3, 33)]  # 2022-03 .. 2024-08
    units = suspensions([("P", month, 1.0, 200) for month in months])
    figure = charts.return_rate_heatmap(returns_table([]), units)
    (axis,) = [a for a in figure.axes if a.get_title()]
    ticks = [t.get_text() for t in axis.get_yticklabels()]
    assert all(YYYY_MM.match(t) for t in ticks)
    # 30 build months: January, April, July, October (common practice, no source), every January shown
    assert ticks[:3] == ["2022-04", "2022-07", "2022-10"] and "2023-01" in ticks and "2024-01" in ticks
    assert len(axis.images[0].get_array()) == 30
    assert "no units" in charts.return_rate_heatmap(returns_table([]), suspensions([])).axes[0].texts[0].get_text()


def alert_rows():
    """An alert table: P with a normal month, a flagged one, one with no returns (O = 0) and one with no
    exposure (E = 0); "$x$" with a single month."""
    nan = float("nan")
    rows = [
        # product, build month, O, E, ratio, lower, upper, flagged
        ("P", JAN, 10.0, 10.0, 1.0, 0.48, 1.84, False),
        ("P", FEB, 30.0, 10.0, 3.0, 2.02, 4.28, True),
        ("P", MAR, 0.0, 2.0, 0.0, 0.0, 1.84, False),
        ("P", dt.date(2024, 4, 1), 0.0, 0.0, nan, nan, nan, False),
        ("$x$", JAN, 4.0, 5.0, 0.8, 0.22, 2.05, False),
    ]
    table = pd.DataFrame(
        rows, columns=["product", "build_month", "observed", "expected", "ratio", "lower", "upper", "is_flagged"]
    )
    for view in ("early", "window"):
        table[f"{view}_observed_returns"] = table["observed"]
        table[f"{view}_expected_returns"] = table["expected"]
        table[f"{view}_ratio"] = table["ratio"]
        table[f"{view}_ratio_lower"] = table["lower"]
        table[f"{view}_ratio_upper"] = table["upper"]
        table[f"{view}_p_value"] = 0.5
        table[f"{view}_q_value"] = 0.5
    table["units"] = 1000
    table["early_life_months"] = 3
    table["reason"] = ""
    return table.drop(columns=["observed", "expected", "ratio", "lower", "upper"])


def test_observed_to_expected_chart_marks_and_labels_flagged_months():
    figure = charts.observed_to_expected_by_build_month(SimpleNamespace(table=alert_rows()))
    figure.savefig(io.BytesIO(), format="png", dpi=30)
    titles = [a.get_title() for a in figure.axes if a.get_visible()]
    assert titles == [
        r"\$x\$: whole observation window", "P: whole observation window",
        r"\$x\$: first 3 months in service", "P: first 3 months in service",
    ]
    for title in ("P: whole observation window", "P: first 3 months in service"):
        axis = next(a for a in figure.axes if a.get_title() == title)
        assert axis.get_yscale() == "log"
        assert [t.get_text() for t in axis.texts] == ["2024-02"]  # the flagged month, labelled
        legend = [t.get_text() for t in axis.get_legend().get_texts()]
        assert "flagged build month" in legend and "no returns (drawn at the bottom)" in legend
        points = {tuple(line.get_xydata()[0]) for line in axis.lines if line.get_marker() in ("o", "D", "v")}
        xs = sorted(x for x, _ in points)
        assert len(xs) == 3  # January, February, March; April (E = 0) is not drawn
        assert any(line.get_marker() == "D" for line in axis.lines)
        assert any(list(line.get_ydata()) == [1.0, 1.0] for line in axis.lines)  # the reference line at 1
        floor = axis.get_ylim()[0]
        zero = next(line for line in axis.lines if line.get_marker() == "v")
        assert zero.get_ydata()[0] > floor  # O = 0 drawn just above the bottom, on the log axis
        assert all(YYYY_MM.match(t.get_text()) for t in axis.get_xticklabels())
    table_form = charts.observed_to_expected_by_build_month(alert_rows())  # the table works too
    assert len([a for a in table_form.axes if a.get_visible()]) == 4
    empty = charts.observed_to_expected_by_build_month(alert_rows().iloc[0:0])
    assert "no build month" in empty.axes[0].texts[0].get_text()


def test_cumulative_returns_use_unit_months_and_pick_out_flagged_months():
    units = suspensions([
        ("P", JAN, age(92), 1000), ("P", FEB, age(94), 1000), ("P", MAR, age(61), 1000), ("$x$", JAN, age(31), 400),
        ("E", JAN, 0.0, 50),
    ])
    returned = returns_table([("P", JAN, 1, 2), ("P", JAN, 2, 1), ("P", FEB, 1, 20), ("P", FEB, 2, 10)])
    for flagged in ({("P", FEB)}, alert_rows().assign(product="P")):  # pairs, or the alert table (Feb flagged)
        figure = charts.cumulative_returns_per_unit(returned, units, flagged)
        figure.savefig(io.BytesIO(), format="png", dpi=30)
        panel = next(a for a in figure.axes if a.get_title() == "P")
        lines = {line.get_label(): line for line in panel.lines}
        assert set(lines) == {"2024-02 (flagged)", "other build months (2)"} | {
            line.get_label() for line in panel.lines if line.get_label().startswith("_")
        }
        flagged_line = lines["2024-02 (flagged)"]
        assert flagged_line.get_linewidth() > 2 and flagged_line.get_color() != "#9a9a9a"
        # Feb: 1,000 units to 94 days, 20 + 10 returns; month 4 has 2 days, 66 unit-months (thin), so the line
        # ends at 3 (hand computation: returns x 1,000 / unit-months, months of 31, 30 and 31 days)
        assert flagged_line.get_xdata().tolist() == [0, 1, 2, 3]
        month_1, month_2 = 20 * 1000 / (1000 * 31 / L), 10 * 1000 / (980 * 30 / L)
        assert flagged_line.get_ydata() == pytest.approx([0.0, month_1, month_1 + month_2, month_1 + month_2])
        greys = [line for line in panel.lines if line.get_color() == "#9a9a9a" and len(line.get_xdata())]
        january = next(line for line in greys if len(line.get_xdata()) == 4)
        jan_1, jan_2 = 2 * 1000 / (1000 * 31 / L), 1 * 1000 / (998 * 30 / L)
        assert january.get_ydata() == pytest.approx([0.0, jan_1, jan_1 + jan_2, jan_1 + jan_2])
        march = next(line for line in greys if len(line.get_xdata()) == 3)
        assert march.get_ydata().tolist() == [0.0, 0.0, 0.0]  # a month with no returns
    titles = [a.get_title() for a in figure.axes if a.get_visible()]
    assert titles == [r"\$x\$", "E", "P"]
    one_month = next(a for a in figure.axes if a.get_title() == r"\$x\$")
    assert len([line for line in one_month.lines if len(line.get_xdata())]) == 1
    empty = next(a for a in figure.axes if a.get_title() == "E")
    assert "no build month with enough exposure" in empty.texts[0].get_text()
