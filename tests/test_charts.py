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

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.text import Text

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


def drawn(figure):
    """The figure laid out as it is saved (Agg), so tick labels and text extents are final."""
    canvas = FigureCanvasAgg(figure)
    canvas.draw()
    return canvas.get_renderer()


def small_fit():
    data = LifeData.from_monthly_returns([1, 2, 3, 4, 5], [12, 13, 12, 10, 6], [5.0], [4900.0], day_grid=False)
    return Fitter(WEIBULL).fit(data)


def test_percent_labels_keep_their_digits_and_their_percent_sign():
    # issue 12: "10.00%".rstrip("0") stripped nothing (the "%" came first) and printed "10.00%", "0.10%"
    # (common practice, no source: a percent with only the digits it needs)
    assert [charts.percent_label(f) for f in (1e-4, 1e-3, 0.01, 0.05, 0.1, 0.632, 0.99)] == [
        "0.01%", "0.1%", "1%", "5%", "10%", "63.2%", "99%",
    ]
    with pytest.raises(ValueError, match="fraction"):
        charts.percent_label(float("nan"))


def test_probability_plot_axes_line_band_warranty_end_and_guide():
    table = life_table(matrix())
    figure = charts.weibull_probability_plot(table, {"P": small_fit(), "Q": None}, warranty_months={"P": 6, "Q": 6})
    renderer = drawn(figure)
    panel_p = next(a for a in figure.axes if a.get_title() == "P")
    panel_q = next(a for a in figure.axes if a.get_title() == "Q")
    # bottom axis in months, as a reader counts them (no 10^0, 10^1)
    labels = [t.get_text() for t in panel_p.get_xticklabels() if t.get_text()]
    assert labels and set(labels) <= {"1", "2", "3", "6"} and "1" in labels
    # the line stops at the warranty's end on the day grid (month 6 ends at 183 days: hand arithmetic)
    fitted = next(line for line in panel_p.lines if "Weibull shape" in str(line.get_label()))
    assert fitted.get_xdata().max() == pytest.approx(183 / (365.25 / 12))
    end = next(line for line in panel_p.lines if line.get_gid() == "warranty-end")
    assert end.get_xdata()[0] == pytest.approx(183 / (365.25 / 12)) and "warranty end (6 months)" == end.get_label()
    # the band is drawn to be seen (and printable): alpha >= 0.25 plus its two edge lines
    band = next(c for c in panel_p.collections if "Wald band" in str(c.get_label()))
    assert band.get_alpha() >= 0.25
    # the right axis: percent labels that do not overlap one another
    secondary = panel_p.child_axes[0]
    ticks = [t for t in secondary.get_yticklabels() if t.get_text()]
    assert ticks and all(re.fullmatch(r"\d+(\.\d*[1-9])?%", t.get_text()) for t in ticks)
    boxes = sorted((t.get_window_extent(renderer) for t in ticks), key=lambda b: b.y0)
    assert all(lower.y1 <= upper.y0 for lower, upper in zip(boxes, boxes[1:]))
    # the reading guide's words on the chart
    assert "bending down away from it" in figure._suptitle.get_text().replace("\n", " ")
    assert not any("Weibull shape" in t.get_text() for t in panel_q.get_legend().get_texts())


@pytest.mark.parametrize("count", [1, 12])
def test_the_panels_start_below_a_several_line_title_however_tall_the_grid(count):
    # 12 product panels made the figure 18 inches tall and the top row's titles ran under the five-line
    # reading guide (seen on a 40-line run); the footer added afterwards must keep the gap too
    base = life_table(matrix())
    base = base[base["product"] == "P"]
    table = pd.concat([base.assign(product=f"L{i:02d}") for i in range(count)], ignore_index=True)
    figure = charts.weibull_probability_plot(table, {f"L{i:02d}": small_fit() for i in range(count)})
    charts.with_footer(figure, "2026-11-30-abc", dt.date(2026, 11, 30))
    renderer = drawn(figure)
    title_bottom = figure._suptitle.get_window_extent(renderer).y0
    tops = [a.get_tightbbox(renderer).y1 for a in figure.axes if a.get_visible()]
    assert max(tops) < title_bottom


def test_fraction_ticks_are_thinned_to_a_readable_gap():
    # a span of 10 on the log(-log) scale: ticks at least 7.5% of it (0.75) apart (hand rule, no source)
    ticks = charts.fraction_ticks(-12.0, -2.0)
    positions = np.log(-np.log1p(-np.array(ticks)))
    assert len(ticks) >= 3 and np.all(np.diff(positions) >= 0.075 * 10.0 - 1e-12)
    assert charts.fraction_ticks(1.0, 1.0) == []


AS_OF = dt.date(2024, 11, 30)


def forecast_frames():
    months = [dt.date(2024, 12, 1), dt.date(2025, 1, 1), dt.date(2025, 2, 1)]
    forecast = pd.DataFrame({
        "product": ["P"] * 3 + ["Q"] * 3, "build_month": [dt.date(2024, 1, 1)] * 6, "month": months * 2,
        "expected_returns": [10.0, 8.0, 6.0, 3.0, 2.0, 1.0],
        "expected_claims": [12.0, 8.0, 6.0, 3.0, 2.0, 1.0],  # P: 2 claims of earlier failures in December
    })
    intervals = pd.DataFrame({"product": ["P"] * 3, "month": months, "expected_returns": [10.0, 8.0, 6.0],
                              "returns_lower": [5, 4, 2], "returns_upper": [15, 12, 10]})
    returns = pd.DataFrame({"product": ["P", "P", "Q", "P"], "build_month": [dt.date(2024, 1, 1)] * 4,
                            "claim_month": [dt.date(2024, 10, 1), dt.date(2024, 11, 1), dt.date(2024, 11, 1),
                                            dt.date(2023, 1, 1)],
                            "returns": [7, 9, 4, 100]})
    costs = forecast.assign(expected_cost=forecast["expected_claims"] * 100.0)
    return forecast, intervals, returns, costs


def test_calendar_month_chart_as_of_line_returns_to_date_band_and_cost():
    forecast, intervals, returns, costs = forecast_frames()
    figure = charts.expected_returns_by_month(forecast, as_of_date=AS_OF, returns_to_date=returns,
                                              intervals=intervals, costs=costs, currency="EUR")
    drawn(figure)
    counts, cost = figure.axes[0], figure.axes[1]
    december = 2024 * 12 + 11  # month number of 2024-12
    # the as-of line at the end of 2024-11-30, the start of December, on both panels
    assert charts.as_of_line_x(AS_OF) == december
    assert charts.as_of_line_x(dt.date(2024, 2, 15)) == pytest.approx(2024 * 12 + 1 + 15 / 29)
    for axis in (counts, cost):
        line = next(l for l in axis.lines if l.get_gid() == "as-of")
        assert line.get_xdata()[0] == december
    # the forecast (claims, each month at its middle) right of the line, returns counted left of it
    expected = next(l for l in counts.lines if l.get_gid() == "forecast:P")
    assert list(expected.get_xdata()) == [december + 0.5, december + 1.5, december + 2.5]
    assert list(expected.get_ydata()) == [12.0, 8.0, 6.0]
    counted = next(l for l in counts.lines if l.get_gid() == "returns:P")
    assert list(counted.get_xdata()) == [december - 1.5, december - 0.5]  # 2024-10 and -11; 2023-01 too old
    assert list(counted.get_ydata()) == [7.0, 9.0]
    # the band: the first failures' interval plus the 2 claims of earlier failures at their expected value
    band = next(c for c in counts.collections if c.get_gid() == "band:P")
    vertices = band.get_paths()[0].vertices
    assert vertices[:, 1].min() == pytest.approx(2.0) and vertices[:, 1].max() == pytest.approx(17.0)
    assert not any(c.get_gid() == "band:Q" for c in counts.collections)  # no interval rows for Q
    # the cost view: stacked bars per product, totals in the title with the currency
    heights = sorted(round(p.get_height(), 6) for p in cost.patches)
    assert heights == [100.0, 200.0, 300.0, 600.0, 800.0, 1200.0]
    assert "3,200 (EUR) still to pay" in cost.get_title()
    assert counts.get_title().startswith("32 claims still expected")
    labels = [t.get_text() for t in cost.get_xticklabels() if t.get_text()]
    assert labels[0] == "2024-10" and labels[-1] == "2025-02" and all(YYYY_MM.match(t) for t in labels)
    legend = [t.get_text() for t in counts.get_legend().get_texts()]
    assert legend == ["P", "Q", "as of 2024-11-30", "expected", "returns counted", "5-95% prediction interval"]


def test_calendar_month_chart_alone_and_empty():
    forecast, *_ = forecast_frames()
    figure = charts.expected_returns_by_month(forecast.drop(columns="expected_claims"))
    assert len(figure.axes) == 1 and not any(l.get_gid() == "as-of" for l in figure.axes[0].lines)
    assert figure.axes[0].get_title().startswith("30 returns still expected")
    empty = charts.expected_returns_by_month(forecast.iloc[0:0])
    assert "no forecast" in empty.axes[0].texts[0].get_text()


def test_series_differ_in_line_style_and_marker_not_only_colour():
    # a chart printed in grey: the Okabe & Ito colours blue, vermillion and bluish green are all mid-grey
    # (Rec. 709 luma of their sRGB values 0.37, 0.44, 0.48: hand arithmetic), so the series also differ in
    # line style and marker. The palette is Okabe & Ito (2008), Color Universal Design (from memory).
    assert charts.PALETTE[:3] == ("#0072B2", "#D55E00", "#009E73")
    assert set(charts.OKABE_ITO.values()) == {"#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2",
                                              "#D55E00", "#CC79A7"}
    styles = {(str(charts.series_style(i)["linestyle"]), charts.series_style(i)["marker"]) for i in range(8)}
    assert len(styles) == 8


def test_footer_carries_as_of_date_and_run_id_once():
    forecast, *_ = forecast_frames()
    figure = charts.expected_returns_by_month(forecast)
    height = figure.get_figheight()
    charts.with_footer(figure, "2024-11-30-abc123", AS_OF)
    charts.with_footer(figure, "2024-11-30-abc123", AS_OF)
    footers = [t for t in figure.texts if t.get_gid() == charts.FOOTER_GID]
    assert [t.get_text() for t in footers] == ["as of 2024-11-30, run 2024-11-30-abc123"]
    assert figure.get_figheight() == pytest.approx(height + 0.28)
    renderer = drawn(figure)
    footer_box = footers[0].get_window_extent(renderer)
    assert footer_box.y0 >= 0 and all(  # below every axis and its labels
        footer_box.y1 <= axis.get_tightbbox(renderer).y0 + 1 for axis in figure.axes
    )


def test_every_text_has_one_type_size():
    forecast, intervals, returns, costs = forecast_frames()
    figures = [
        charts.expected_returns_by_month(forecast, as_of_date=AS_OF, returns_to_date=returns, intervals=intervals,
                                         costs=costs),
        charts.weibull_probability_plot(life_table(matrix()), {"P": small_fit(), "Q": None}),
    ]
    for figure in figures:
        drawn(figure)
        sizes = {t.get_fontsize() for t in figure.findobj(Text) if t.get_text() and t.get_visible()}
        assert sizes == {charts.TYPE_SIZE}


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


def test_clear_departures_are_the_cells_whose_exact_interval_excludes_one():
    # reference: Garwood's (1936) exact interval of a Poisson mean from chi-square quantiles (scipy.stats.chi2):
    # lower = chi2(a/2; 2k) / 2, upper = chi2(1 - a/2; 2k + 2) / 2; the ratio's interval divides them by E
    from scipy import stats

    rng = np.random.default_rng(11)
    expected = rng.uniform(0.2, 60.0, 4000)
    returns = rng.poisson(expected * rng.choice([0.3, 1.0, 2.5], size=expected.size)).astype(float)
    alpha = 1.0 - charts.CLEAR_DEPARTURE_LEVEL
    lower = np.where(returns > 0, stats.chi2.ppf(alpha / 2, 2 * returns) / 2, 0.0) / expected
    upper = stats.chi2.ppf(1 - alpha / 2, 2 * returns + 2) / 2 / expected
    want = np.where(lower > 1.0, 1, np.where(upper < 1.0, -1, 0))
    got = charts.clear_departures(returns, expected)
    assert (got == want).all()
    assert (got == 1).sum() > 100 and (got == -1).sum() > 100 and (got == 0).sum() > 100
    # nothing expected, or no count: no mark
    assert charts.clear_departures(np.array([3.0, np.nan]), np.array([0.0, 5.0])).tolist() == [0, 0]
    with pytest.raises(ValueError, match="level"):
        charts.clear_departures(returns, expected, level=1.0)


def test_heatmap_marks_clear_departures_so_grey_print_reads_above_from_below():
    # P, January: 90 and 80 returns in months 1 and 2 against about 33 expected (far more); February month
    # 1: one return against about 33 (far fewer). The marks sit on the ratio
    # panel only, on cells that are coloured (not thin), + for more and - for fewer
    returned, units = heat_map_inputs()
    many = returns_table([("P", JAN, 1, 90), ("P", JAN, 2, 80), ("P", FEB, 1, 1)])
    figure = charts.return_rate_heatmap(many, units, {"P": Exponential(30.0), "$x$": None})
    drawn(figure)
    ratio_axis = next(a for a in figure.axes if a.get_title() == "P: observed / expected (baseline)")
    more = next(c for c in ratio_axis.collections if c.get_gid() == "more-than-expected")
    assert sorted(map(tuple, more.get_offsets().tolist())) == [(0.0, 0.0), (1.0, 0.0)]  # (month - 1, row)
    fewer = [c for c in ratio_axis.collections if c.get_gid() == "fewer-than-expected"]
    marked = {tuple(xy) for c in fewer for xy in c.get_offsets().tolist()}
    cells = charts.return_rate_cells(many, units, {"P": Exponential(30.0)})
    shown = cells[(cells["product"] == "P") & ~cells["is_ratio_thin"]]
    signs = charts.clear_departures(shown["returns"].to_numpy(), shown["expected_returns"].to_numpy())
    months = charts._month_numbers(shown["build_month"]) - charts._month_numbers([JAN])[0]
    want = {(float(k - 1), float(m)) for k, m, sign in zip(shown["months_in_service"], months, signs) if sign == -1}
    assert marked == want
    rate_axis = next(a for a in figure.axes if a.get_title() == "P: returns per 1,000 unit-months")
    assert not any(c.get_gid() in ("more-than-expected", "fewer-than-expected") for c in rate_axis.collections)
    assert "+ more returns than expected, - fewer" in figure.get_suptitle()


def test_flagged_finding_words():
    jan = charts._month_numbers([JAN])[0]
    assert charts.flagged_finding([]) == "no build month flagged"
    assert charts.flagged_finding([jan + 1, jan]) == "2024-01, 2024-02 flagged"
    assert charts.flagged_finding(range(jan, jan + 5)) == "2024-01, 2024-02, 2024-03 and 2 more flagged"


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
    assert titles == [  # each title says what the panel shows: which build months are flagged
        r"\$x\$: no build month flagged; whole observation window", "P: 2024-02 flagged; whole observation window",
        r"\$x\$: no build month flagged; first 3 months in service", "P: 2024-02 flagged; first 3 months in service",
    ]
    for title in ("P: 2024-02 flagged; whole observation window", "P: 2024-02 flagged; first 3 months in service"):
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
        panel = next(a for a in figure.axes if a.get_title() == "P: 2024-02 flagged")
        lines = {line.get_label(): line for line in panel.lines}
        assert set(lines) == {"2024-02 (flagged)", "other build months (2)"} | {
            line.get_label() for line in panel.lines if line.get_label().startswith("_")
        }
        flagged_line = lines["2024-02 (flagged)"]
        assert flagged_line.get_linewidth() > 2 and flagged_line.get_color() != charts.MUTED
        # Feb: 1,000 units to 94 days, 20 + 10 returns; month 4 has 2 days, 66 unit-months (thin), so the line
        # ends at 3 (hand computation: returns x 1,000 / unit-months, months of 31, 30 and 31 days)
        assert flagged_line.get_xdata().tolist() == [0, 1, 2, 3]
        month_1, month_2 = 20 * 1000 / (1000 * 31 / L), 10 * 1000 / (980 * 30 / L)
        assert flagged_line.get_ydata() == pytest.approx([0.0, month_1, month_1 + month_2, month_1 + month_2])
        greys = [line for line in panel.lines if line.get_color() == charts.MUTED and len(line.get_xdata())]
        january = next(line for line in greys if len(line.get_xdata()) == 4)
        jan_1, jan_2 = 2 * 1000 / (1000 * 31 / L), 1 * 1000 / (998 * 30 / L)
        assert january.get_ydata() == pytest.approx([0.0, jan_1, jan_1 + jan_2, jan_1 + jan_2])
        march = next(line for line in greys if len(line.get_xdata()) == 3)
        assert march.get_ydata().tolist() == [0.0, 0.0, 0.0]  # a month with no returns
    titles = [a.get_title() for a in figure.axes if a.get_visible()]
    assert titles == [r"\$x\$: no build month flagged", "E: no build month flagged", "P: 2024-02 flagged"]
    panel = next(a for a in figure.axes if a.get_title() == "P: 2024-02 flagged")
    assert [t for t in panel.get_xticks() if 0 <= t <= 3] == [0.0, 3.0]  # months in service by quarters
    one_month = next(a for a in figure.axes if a.get_title() == r"\$x\$: no build month flagged")
    assert len([line for line in one_month.lines if len(line.get_xdata())]) == 1
    empty = next(a for a in figure.axes if a.get_title() == "E: no build month flagged")
    assert "no build month with enough exposure" in empty.texts[0].get_text()


# -- finance and the Pareto by build month (issue 12) ---------------------------------------------------


def reserve_frames():
    reserve = pd.DataFrame({
        "product": ["P", "Q", "R"], "reserve": [300.0, 100.0, 50.0], "reserve_current": [200.0, 60.0, 50.0],
        "reserve_non_current": [100.0, 40.0, 0.0], "reserve_lower": [250.0, 80.0, 40.0],
        "reserve_upper": [360.0, 125.0, 65.0], "reserve_open_claims": [10.0, 0.0, 0.0], "reserve_handling": [0.0, 5.0, 0.0],
        "currency": ["EUR"] * 3,
    })
    months = [dt.date(2024, 12, 1), dt.date(2025, 11, 1), dt.date(2025, 12, 1)]
    costs = pd.DataFrame({"product": ["P"] * 3 + ["Q"] * 3, "month": months * 2,
                          "expected_cost": [100.0, 90.0, 100.0, 30.0, 30.0, 35.0]})
    roll = pd.DataFrame({
        "product": ["P", "(all products)"], "is_total": [False, True], "opening_as_of_date": [dt.date(2024, 10, 31)] * 2,
        "opening_reserve": [0.0, 420.0], "accruals_for_units_shipped": [0.0, 40.0], "claims_settled": [0.0, 25.0],
        "changes_in_estimate": [0.0, 15.0], "closing_reserve": [0.0, 450.0],
    })
    return reserve, costs, roll


def test_finance_chart_current_split_interval_months_and_movement():
    reserve, costs, roll = reserve_frames()
    figure = charts.reserve_for_finance(reserve, costs, roll, as_of_date=AS_OF, currency=charts.currency_of(reserve),
                                        products=["P", "Q"])
    drawn(figure)
    by_product, by_month, movement = figure.axes[:3]
    # by product: R summed into "1 other products" (no interval: quantiles do not add); current + non-current
    assert [t.get_text() for t in by_product.get_yticklabels()] == ["1 other products", "Q", "P"]
    current = [p.get_width() for p in by_product.patches if p.get_gid() == "reserve-current"]
    later = [p.get_width() for p in by_product.patches if p.get_gid() == "reserve-non-current"]
    assert current == [50.0, 60.0, 200.0] and later == [0.0, 40.0, 100.0]
    whisker = next(c for c in by_product.collections if c.get_gid() == "reserve-interval")
    spans = sorted((min(s[:, 0]), max(s[:, 0])) for s in whisker.get_segments())
    assert spans == [(80.0, 125.0), (250.0, 360.0)]
    assert not any(c.get_gid() == "current-interval" for c in by_product.collections)  # no split intervals given
    # by month: the current part ends with 2025-11, the as-of month + 12 (reserve.CURRENT_MONTHS)
    end = next(l for l in by_month.lines if l.get_gid() == "current-end")
    assert end.get_xdata()[0] == 2025 * 12 + 10 + 0.5
    assert sorted(p.get_height() for p in by_month.patches if p.get_gid() == "month-current") == [120.0, 130.0]
    assert [p.get_height() for p in by_month.patches if p.get_gid() == "month-non-current"] == [135.0]
    assert "open claims, handling: 15" in by_month.get_title()
    # movement: +40 - 25 + 15 = +30 = 450 - 420 (the roll-forward's rows add up)
    heights = {p.get_gid(): p.get_height() for p in movement.patches}
    assert heights == {"movement:+ accruals for units shipped": 40.0, "movement:- claims settled": -25.0,
                       "movement:+/- changes in estimate": 15.0, "movement:= net change": 30.0}
    assert "420.00 -> 450.00 (EUR)" in movement.get_title()
    assert figure._suptitle.get_text().startswith("Warranty reserve to book as of 2024-11-30: 450.00 (EUR), 310.00")


def test_finance_chart_draws_the_current_parts_interval_at_the_end_of_the_solid_part():
    reserve, costs, roll = reserve_frames()
    reserve = reserve.assign(reserve_current_lower=[180.0, 50.0, 45.0], reserve_current_upper=[230.0, 70.0, 55.0])
    figure = charts.reserve_for_finance(reserve, costs, roll, as_of_date=AS_OF, products=["P", "Q"])
    drawn(figure)
    whisker = next(c for c in figure.axes[0].collections if c.get_gid() == "current-interval")
    spans = sorted((min(s[:, 0]), max(s[:, 0])) for s in whisker.get_segments())
    assert spans == [(50.0, 70.0), (180.0, 230.0)]  # Q and P; R is among the others (quantiles do not add)
    legend = [t.get_text() for t in figure.axes[0].get_legend().get_texts()]
    assert "5-95% interval of the current part" in legend


def test_cost_intervals_by_month_are_whiskers_on_both_cost_panels():
    # the reserve_by_calendar_month table's interval (all products) as one whisker per month, from cost_lower
    # to cost_upper at the month's bar; a month without an interval gets none
    reserve, costs, roll = reserve_frames()
    months = [dt.date(2024, 12, 1), dt.date(2025, 11, 1), dt.date(2025, 12, 1)]
    cost_by_month = pd.DataFrame({"month": months, "expected_cost": [130.0, 120.0, 135.0],
                                  "cost_lower": [100.0, 90.0, np.nan], "cost_upper": [170.0, 160.0, np.nan]})
    figure = charts.reserve_for_finance(reserve, costs, roll, as_of_date=AS_OF, cost_by_month=cost_by_month)
    drawn(figure)
    whisker = next(c for c in figure.axes[1].collections if c.get_gid() == "cost-interval")
    spans = sorted((s[0, 0], min(s[:, 1]), max(s[:, 1])) for s in whisker.get_segments())
    assert spans == [(2024 * 12 + 11, 100.0, 170.0), (2025 * 12 + 10, 90.0, 160.0)]
    assert "5-95% prediction interval" in [t.get_text() for t in figure.axes[1].get_legend().get_texts()]
    forecast, intervals, returns, month_costs = forecast_frames()
    month_table = month_costs.groupby("month", as_index=False)["expected_cost"].sum()
    month_table = month_table.assign(cost_lower=month_table["expected_cost"] * 0.8,
                                     cost_upper=month_table["expected_cost"] * 1.3)
    figure = charts.expected_returns_by_month(forecast, as_of_date=AS_OF, intervals=intervals, costs=month_costs,
                                              cost_by_month=month_table)
    drawn(figure)
    whisker = next(c for c in figure.axes[1].collections if c.get_gid() == "cost-interval")
    tops = sorted(max(s[:, 1]) for s in whisker.get_segments())
    assert tops == pytest.approx(sorted(month_table["expected_cost"] * 1.3))
    assert [s[0, 0] for s in whisker.get_segments()] == [n + 0.5 for n in charts._month_numbers(month_table["month"])]


def test_many_products_keep_a_colour_each_and_the_finance_labels_clear_of_the_whiskers():
    # 10 products, the run's order most important first: the calendar chart draws the first 7 (one palette
    # colour each; 8 colours in all with the rest summed), the others as one series
    months = [dt.date(2024, 12, 1), dt.date(2025, 1, 1)]
    names = [f"L{i:02d}" for i in range(10)]
    forecast = pd.DataFrame({"product": [n for n in names for _ in months], "month": months * 10,
                             "build_month": [dt.date(2024, 1, 1)] * 20, "expected_returns": np.arange(20, 0, -1.0)})
    order = list(reversed(names))
    figure = charts.expected_returns_by_month(forecast, products=order, as_of_date=AS_OF)
    drawn(figure)
    series = [l.get_gid() for l in figure.axes[0].lines if str(l.get_gid()).startswith("forecast:")]
    assert series == [f"forecast:{n}" for n in order[:7]] + ["forecast:3 other products"]
    colours = {l.get_color() for l in figure.axes[0].lines if str(l.get_gid()).startswith("forecast:")}
    assert len(colours) == 8
    # finance: a product without open claims or handling (NaN) counts 0 in the title, not NaN; each amount is
    # written right of its whisker, level with its bar
    reserve, costs, roll = reserve_frames()
    reserve.loc[1, ["reserve_open_claims", "reserve_handling"]] = np.nan
    figure = charts.reserve_for_finance(reserve, costs, roll, as_of_date=AS_OF)
    drawn(figure)
    assert "open claims, handling: 10)" in figure.axes[1].get_title()
    labels = {t.get_text(): t.xy for t in figure.axes[0].texts if t.get_gid() == "reserve-label"}
    assert labels["300"] == (360.0, 2) and labels["100"] == (125.0, 1)


def test_finance_chart_before_any_earlier_run_says_so():
    reserve, costs, _ = reserve_frames()
    figure = charts.reserve_for_finance(reserve.drop(columns=["reserve_lower", "reserve_upper"]), costs, None,
                                        as_of_date=AS_OF)
    assert any("no earlier run" in t.get_text() for t in figure.axes[2].texts)
    assert not any(c.get_gid() == "reserve-interval" for c in figure.axes[0].collections)
    assert "no reserve" in charts.reserve_for_finance(reserve.iloc[0:0], costs, as_of_date=AS_OF).axes[0].texts[0].get_text()


def test_finance_chart_with_no_product_reserve_draws_an_empty_scale():
    # a run whose products have no reserve yet (every amount NaN) must still draw, not fail on NaN axis
    # limits (found by a clean-clone run of the stale-extracts test; common practice, no source)
    reserve, costs, _ = reserve_frames()
    empty = reserve.assign(**{c: np.nan for c in reserve.columns if c.startswith("reserve")})
    figure = charts.reserve_for_finance(empty, costs, None, as_of_date=AS_OF)
    figure.savefig(io.BytesIO(), format="png", dpi=30)
    assert figure.axes[0].get_xlim() == (0.0, 1.0)


def test_pareto_by_build_month_shows_a_code_concentrated_in_one_month():
    rows = [("P", dt.date(2024, m, 1), "WEAR", 10) for m in (1, 2, 3)]
    rows += [("P", dt.date(2024, 2, 1), "BATCH", 25), ("P", dt.date(2024, 3, 1), "RARE", 1)]
    table = pd.DataFrame(rows, columns=["product", "build_month", "failure_mode", "returns"]).assign(months_in_service=1)
    figure = charts.failure_mode_pareto(table)
    drawn(figure)
    total, by_month = figure.axes[0], figure.axes[1]
    assert [t.get_text() for t in total.get_xticklabels()] == ["WEAR", "BATCH", "RARE"]  # 30, 25, 1
    assert [p.get_height() for p in total.patches] == [30.0, 25.0, 1.0]
    batch = [p for p in by_month.patches if p.get_gid() == "month-code:BATCH"]
    assert [p.get_height() for p in batch] == [0.0, 25.0, 0.0]  # all of it in 2024-02
    assert [p.get_y() for p in batch] == [10.0, 10.0, 10.0]  # stacked on WEAR
    # the same colour for a code in both panels
    assert total.patches[1].get_facecolor() == batch[1].get_facecolor()
    assert [t.get_text() for t in by_month.get_xticklabels()] == ["2024-01", "2024-02", "2024-03"]
    assert "batch defect" in figure._suptitle.get_text()
