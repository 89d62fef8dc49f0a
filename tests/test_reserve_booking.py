"""The reserve as finance books it: currency, cost inflation, discounting, and the current / non-current
split (stages.reserve, config.ReserveSettings).

External check: IFRS for SMEs (2009), Section 21, Appendix example 4 (../shared/reference/README.md):
expected cost 46,000 paid 60% / 30% / 10% in years 1-3, discounted at 6%, 7%, 7%: present value 41,846.
The other figures are hand computations written out beside each check (common practice, no source).
"""

from __future__ import annotations

import datetime as dt
import math
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from warranty_forecast.config import ReserveSettings, settings_from_document
from warranty_forecast.errors import ConfigError
from warranty_forecast.stages.reserve import (
    RESERVE_COLUMNS,
    book_reserve,
    claim_timing,
    discount_factors,
    inflation_factors,
    reserve_by_calendar_month,
    with_prediction_intervals,
    years_from_as_of,
)

BUILD = dt.date(2024, 1, 1)


def _summary(products=("A",)) -> pd.DataFrame:
    return pd.DataFrame({
        "product": list(products), "build_month": [BUILD] * len(products), "units": [1000] * len(products),
        "units_in_channel": [0] * len(products), "returns_to_date": [10] * len(products),
        "cost_to_date": [500.0] * len(products),
    })


def _no_observed_costs(products=("A",)) -> pd.DataFrame:
    return pd.DataFrame({
        "product": list(products), "window_returns": [0] * len(products), "window_mean_cost": [math.nan] * len(products),
        "all_time_returns": [0] * len(products), "all_time_mean_cost": [math.nan] * len(products),
    })


def _forecast(claims_by_month: dict[dt.date, float], product: str = "A") -> pd.DataFrame:
    months = sorted(claims_by_month)
    claims = [claims_by_month[m] for m in months]
    return pd.DataFrame({
        "product": product, "build_month": BUILD, "month": months,
        "expected_returns": claims, "expected_returns_product_model": claims,
        "expected_unreported_returns": 0.0, "expected_repeat_claims": 0.0, "expected_claims": claims,
    })


def _book(claims_by_month, settings, as_of_date):
    return book_reserve(
        _summary(), _no_observed_costs(), _forecast(claims_by_month), {"A": "forecast (weibull)"}, {"A"}, settings,
        as_of_date=as_of_date,
    )


# --- time from the as-of date ---------------------------------------------------------------------------

def test_years_from_as_of_runs_on_the_month_grid_to_the_middle_of_each_month():
    # as of 15 November (30 days): the as-of date sits half way through its month, so the middle of
    # November one, two and three years later is exactly 1, 2 and 3 years away
    years = years_from_as_of([dt.date(2027, 11, 1), dt.date(2028, 11, 1), dt.date(2029, 11, 30)], dt.date(2026, 11, 15))
    assert years.tolist() == [1.0, 2.0, 3.0]
    # as of a month end: the next month's middle is half a month (1/24 year) away; a leap-year February
    # ends at day 29 of 29
    assert years_from_as_of([dt.date(2025, 1, 1)], dt.date(2024, 12, 31)).tolist() == [0.5 / 12]
    assert years_from_as_of([dt.date(2024, 3, 1)], dt.date(2024, 2, 29)).tolist() == [0.5 / 12]
    # the as-of month itself (claims expected before the as-of date's end): no time, no inflation or discount
    assert years_from_as_of([dt.date(2024, 12, 1), dt.date(2024, 6, 1)], dt.date(2024, 12, 31)).tolist() == [0.0, 0.0]
    with pytest.raises(ValueError, match="as_of_date must be a date"):
        years_from_as_of([dt.date(2025, 1, 1)], "2024-12-31")


def test_factors_are_exactly_one_at_rate_zero_and_compound_annually():
    years = np.array([0.0, 1 / 24, 1.0, 2.5])
    assert inflation_factors(years, 0.0).tolist() == [1.0, 1.0, 1.0, 1.0]
    assert discount_factors(years, ReserveSettings()).tolist() == [1.0, 1.0, 1.0, 1.0]
    # hand computation: 1.03 ** 2.5 = 1.03 ** 2 x sqrt(1.03) = 1.0609 x 1.0148892 = 1.0766959
    assert inflation_factors(years, 0.03)[3] == pytest.approx(1.0766959, rel=1e-7)
    # a discount curve is one spot rate per year after the as-of date, the last beyond the list
    curve = ReserveSettings(discount_rate_by_year=(0.06, 0.07))
    assert discount_factors(np.array([1.0, 2.0, 5.0]), curve) == pytest.approx(
        [1 / 1.06, 1 / 1.07**2, 1 / 1.07**5], rel=1e-12
    )
    with pytest.raises(ValueError, match="annual_rate must be a number above -1"):
        inflation_factors(years, -1.0)


def test_the_current_months_are_the_as_of_month_and_the_twelve_after_it():
    timing = claim_timing(
        [dt.date(2024, 12, 1), dt.date(2025, 12, 1), dt.date(2026, 1, 1)], dt.date(2024, 12, 31), ReserveSettings()
    ).set_index("month")
    assert timing["is_current"].tolist() == [True, True, False]
    with pytest.raises(ValueError, match="as_of_date is required"):
        claim_timing([dt.date(2025, 1, 1)], None, ReserveSettings(annual_inflation_rate=0.02))


# --- the booked reserve ---------------------------------------------------------------------------------

def test_ifrs_for_smes_example_undiscounted_and_discounted():
    # IFRS for SMEs (2009), Section 21, Appendix example 4: sales 1,000,000; 6% minor repairs at 30% of the
    # price and 4% major repairs at 70%: expected cost 46,000, paid 60% / 30% / 10% in years 1-3 and
    # discounted at 6%, 7%, 7%: present value 41,846. Here: 1,000 claims at 46 each, in the middle of the
    # month exactly 1, 2 and 3 years after the as-of date (as of 15 November, see the test above).
    as_of = dt.date(2026, 11, 15)
    claims = {dt.date(2027, 11, 1): 600.0, dt.date(2028, 11, 1): 300.0, dt.date(2029, 11, 1): 100.0}
    settings = ReserveSettings(cost_per_claim=46.0, discount_rate_by_year=(0.06, 0.07, 0.07), currency="EUR")
    booked = _book(claims, settings, as_of)
    row = booked.by_product.iloc[0]
    assert row["reserve"] == pytest.approx(46_000.0, rel=1e-12)
    assert round(row["reserve_discounted"]) == 41_846  # IFRS for SMEs (2009), S21 Appendix example 4
    # year 1 (November 2027, the 12th calendar month after the as-of month) is current, years 2-3 are not
    assert row["reserve_current"] == pytest.approx(27_600.0, rel=1e-12)
    assert row["reserve_non_current"] == pytest.approx(18_400.0, rel=1e-12)
    # 27,600 / 1.06 = 26,037.74 (IFRS example's year 1); 13,800 / 1.07^2 + 4,600 / 1.07^3 = 15,808.43
    assert row["reserve_current_discounted"] == pytest.approx(26_037.74, abs=0.01)
    assert row["reserve_non_current_discounted"] == pytest.approx(15_808.43, abs=0.01)
    assert row["currency"] == "EUR" and set(booked.by_build_month["currency"]) == {"EUR"}
    assert list(booked.by_build_month.columns) == list(RESERVE_COLUMNS)
    # the costed forecast carries the same amounts month by month
    assert booked.forecast["expected_cost"].sum() == pytest.approx(46_000.0, rel=1e-12)
    assert round(booked.forecast["expected_cost_discounted"].sum()) == 41_846


def test_inflation_and_discount_by_hand():
    # as of 31 December 2024, cost 100 a claim, 10% inflation: one claim in January 2025 (1/24 year away)
    # and one in January 2026 (12.5/12 years away). Hand: ln 1.1 / 24 = 0.00397126, e^that = 1.0039792, so
    # 100 x 1.0039792 = 100.39792; 1.1 ^ (12.5/12) = 1.1 x 1.0039792, so 110.43771; reserve 210.83562.
    # January 2026 is the 13th month after the as-of month: non-current.
    claims = {dt.date(2025, 1, 1): 1.0, dt.date(2026, 1, 1): 1.0}
    booked = _book(claims, ReserveSettings(cost_per_claim=100.0, annual_inflation_rate=0.10), dt.date(2024, 12, 31))
    row = booked.by_build_month.iloc[0]
    assert row["reserve"] == pytest.approx(210.83562, abs=1e-5)
    assert row["reserve_current"] == pytest.approx(100.39792, abs=1e-5)
    assert row["reserve_non_current"] == pytest.approx(110.43771, abs=1e-5)
    assert row["reserve_discounted"] == row["reserve"]  # no discount rate
    assert booked.forecast.set_index("month")["expected_cost"].to_dict() == pytest.approx(
        {dt.date(2025, 1, 1): 100.39792, dt.date(2026, 1, 1): 110.43771}, abs=1e-5
    )
    # inflation and discounting at the same rate cancel
    level = _book(claims, ReserveSettings(cost_per_claim=100.0, annual_inflation_rate=0.05, annual_discount_rate=0.05),
                  dt.date(2024, 12, 31)).by_build_month.iloc[0]
    assert level["reserve_discounted"] == pytest.approx(200.0, rel=1e-12)
    assert level["reserve_current_discounted"] == pytest.approx(100.0, rel=1e-12)


def test_rates_of_zero_change_nothing():
    claims = {dt.date(2024, 12, 1): 0.3, dt.date(2025, 1, 1): 1.7, dt.date(2025, 9, 1): 2.1, dt.date(2027, 3, 1): 0.9}
    settings = ReserveSettings(cost_per_claim=61.609954)
    dated = _book(claims, settings, dt.date(2024, 12, 31))
    undated = _book(claims, settings, None)  # a caller that only prices: no as-of date, no split
    for booked in (dated, undated):
        table = booked.by_build_month
        # the reserve is claims x cost per claim to the last bit, and its discounted value the same
        assert (table["reserve"] == table["expected_future_claims"] * table["cost_per_claim"]).all()
        assert (table["reserve_discounted"] == table["reserve"]).all()
    assert dated.by_build_month["reserve"].equals(undated.by_build_month["reserve"])
    assert dated.forecast["expected_cost"].equals(undated.forecast["expected_cost"])
    row = dated.by_build_month.iloc[0]
    # current: December 2024 to September 2025 (0.3 + 1.7 + 2.1 claims); March 2027 is later
    assert row["reserve_current"] == pytest.approx(4.1 * 61.609954, rel=1e-12)
    assert row["reserve_non_current"] == pytest.approx(0.9 * 61.609954, rel=1e-12)
    assert row["reserve_current"] + row["reserve_non_current"] == pytest.approx(row["reserve"], rel=1e-12)
    assert row["currency"] == "XXX"  # ISO 4217's code for "no currency": the default names none
    assert math.isnan(undated.by_build_month.iloc[0]["reserve_current"])


def test_products_without_forecast_or_cost_keep_an_empty_reserve_and_split():
    summary = _summary(("A", "B"))
    forecast = _forecast({dt.date(2025, 1, 1): 2.0})
    booked = book_reserve(
        summary, _no_observed_costs(("A", "B")), forecast, {"A": "forecast (weibull)"}, {"A"},
        ReserveSettings(annual_inflation_rate=0.02, annual_discount_rate=0.03), as_of_date=dt.date(2024, 12, 31),
    )
    table = booked.by_build_month.set_index("product")
    amounts = ["reserve", "reserve_discounted", "reserve_current", "reserve_non_current",
               "reserve_current_discounted", "reserve_non_current_discounted"]
    assert table.loc["A", amounts].isna().all()  # A has a forecast but no cost per claim
    assert table.loc["B", amounts].isna().all()  # B has no forecast
    assert math.isnan(booked.total)


def test_a_forecast_product_without_future_claims_books_zero_in_every_column():
    empty = _forecast({}).astype({"month": object, "build_month": object})
    booked = book_reserve(
        _summary(), _no_observed_costs(), empty, {"A": "forecast (weibull)"}, {"A"},
        ReserveSettings(cost_per_claim=80.0, annual_inflation_rate=0.02, annual_discount_rate=0.03),
        as_of_date=dt.date(2024, 12, 31),
    )
    amounts = ["reserve", "reserve_discounted", "reserve_current", "reserve_non_current",
               "reserve_current_discounted", "reserve_non_current_discounted"]
    assert booked.by_build_month[amounts].iloc[0].tolist() == [0.0] * 6
    assert booked.forecast.empty and "expected_cost_discounted" in booked.forecast


def test_prediction_intervals_are_inflated_like_the_reserve_and_unchanged_at_rate_zero():
    # a stand-in for stages.prediction.ReturnsPrediction: quantiles of the first failures' cost (uninflated)
    claims = {dt.date(2025, 1, 1): 3.0, dt.date(2026, 6, 1): 1.0}
    prediction = SimpleNamespace(
        by_build_month=pd.DataFrame({
            "product": ["A"], "build_month": [pd.Timestamp(BUILD)], "returns_lower": [1], "returns_median": [4],
            "returns_upper": [8], "reserve_lower": [100.0], "reserve_median": [400.0], "reserve_upper": [800.0],
        }),
        reserve_by_product=pd.DataFrame({
            "product": ["A"], "reserve_lower": [100.0], "reserve_median": [400.0], "reserve_upper": [800.0],
        }),
        by_product=pd.DataFrame({
            "product": ["A"], "horizon": ["to_warranty_end"], "lower": [1], "median": [4], "upper": [8],
        }),
        by_month=pd.DataFrame({
            "product": ["A"] * 2, "month": [pd.Timestamp(m) for m in claims], "returns_lower": [0, 0],
            "returns_median": [3, 1], "returns_upper": [6, 3],
        }),
    )
    flat, _ = with_prediction_intervals(_book(claims, ReserveSettings(cost_per_claim=100.0), dt.date(2024, 12, 31)), prediction)
    assert flat.by_build_month[["reserve_lower", "reserve_median", "reserve_upper"]].iloc[0].tolist() == [100.0, 400.0, 800.0]
    assert flat.by_product[["reserve_lower", "reserve_median", "reserve_upper"]].iloc[0].tolist() == [100.0, 400.0, 800.0]
    inflated_settings = ReserveSettings(cost_per_claim=100.0, annual_inflation_rate=0.04, annual_discount_rate=0.05)
    inflated, _ = with_prediction_intervals(_book(claims, inflated_settings, dt.date(2024, 12, 31)), prediction)
    # the reserve's inflation factor: reserve / (4 claims x 100); the intervals are scaled by it, not discounted
    factor = inflated.by_build_month["reserve"].iloc[0] / 400.0
    assert factor > 1.0
    for table in (inflated.by_build_month, inflated.by_product):
        assert table[["reserve_lower", "reserve_median", "reserve_upper"]].iloc[0].tolist() == pytest.approx(
            [100.0 * factor, 400.0 * factor, 800.0 * factor], abs=0.005
        )


def test_cost_intervals_by_calendar_month_are_inflated_per_month_with_the_other_claims_on_top():
    # by hand: a month's interval = (drawn first-failure cost + claims beyond the first failures x cost per
    # claim) x that month's inflation factor (claim_timing), to the cent; the run's table sums the products'
    # expectations and takes the per-draw sums' quantiles (a stand-in for stages.prediction's cost_by_month)
    as_of = dt.date(2024, 12, 31)
    months = [dt.date(2025, 1, 1), dt.date(2026, 6, 1)]
    forecast = pd.concat([_forecast({months[0]: 3.0, months[1]: 1.0}, "A"), _forecast({months[0]: 2.0}, "B")],
                         ignore_index=True)
    forecast.loc[0, "expected_unreported_returns"] = 0.5  # A, January 2025: half a claim not yet reported
    forecast.loc[0, "expected_claims"] = 3.5
    settings = ReserveSettings(cost_per_claim=100.0, annual_inflation_rate=0.04)
    booked = book_reserve(_summary(("A", "B")), _no_observed_costs(("A", "B")), forecast,
                          {"A": "forecast (weibull)", "B": "forecast (weibull)"}, {"A", "B"}, settings, as_of_date=as_of)
    prediction = SimpleNamespace(
        by_build_month=pd.DataFrame({
            "product": ["A", "B"], "build_month": [pd.Timestamp(BUILD)] * 2, "returns_lower": [1, 0],
            "returns_median": [4, 2], "returns_upper": [8, 5], "reserve_lower": [100.0, 0.0],
            "reserve_median": [400.0, 200.0], "reserve_upper": [800.0, 500.0],
        }),
        reserve_by_product=pd.DataFrame({
            "product": ["A", "B"], "reserve_lower": [100.0, 0.0], "reserve_median": [400.0, 200.0],
            "reserve_upper": [800.0, 500.0],
        }),
        by_product=pd.DataFrame({
            "product": ["A", "B"], "horizon": ["to_warranty_end"] * 2, "lower": [1, 0], "median": [4, 2], "upper": [8, 5],
        }),
        by_month=pd.DataFrame({
            "product": ["A", "A", "B"], "month": [pd.Timestamp(m) for m in (*months, months[0])],
            "returns_lower": [0, 0, 0], "returns_median": [3, 1, 2], "returns_upper": [6, 3, 5],
            "expected_cost": [300.0, 100.0, 200.0], "cost_lower": [100.0, 0.0, 0.0],
            "cost_median": [300.0, 100.0, 200.0], "cost_upper": [600.0, 300.0, 500.0],
        }),
        cost_by_month=pd.DataFrame({
            "month": months, "products": [2, 1], "expected_cost": [500.0, 100.0], "cost_lower": [200.0, 0.0],
            "cost_median": [500.0, 100.0], "cost_upper": [900.0, 300.0],
        }),
    )
    booked, calendar = with_prediction_intervals(booked, prediction)
    factor = claim_timing(months, as_of, settings).set_index("month")["inflation_factor"]
    assert factor.iloc[0] > 1.0 and factor.iloc[1] > factor.iloc[0]
    a_january = calendar[(calendar["product"] == "A") & (calendar["month"] == months[0])].iloc[0]
    assert a_january[["cost_lower", "cost_median", "cost_upper"]].tolist() == pytest.approx(
        [round((v + 50.0) * factor.iloc[0], 2) for v in (100.0, 300.0, 600.0)], abs=1e-9
    )
    assert a_january["expected_cost"] == pytest.approx(350.0 * factor.iloc[0], rel=1e-12)
    assert a_january["currency"] == "XXX"
    table = reserve_by_calendar_month(booked, prediction, as_of).set_index("month")
    assert table.loc[months[0], ["cost_lower", "cost_median", "cost_upper"]].tolist() == pytest.approx(
        [round((v + 50.0) * factor.iloc[0], 2) for v in (200.0, 500.0, 900.0)], abs=1e-9
    )
    assert table.loc[months[1], "cost_upper"] == pytest.approx(round(300.0 * factor.iloc[1], 2), abs=1e-9)
    assert table["products"].tolist() == [2, 1]
    assert table["is_current"].tolist() == [True, False]  # 2026-06 is past the as-of month + 12
    assert table["expected_claims"].tolist() == pytest.approx([5.5, 1.0])
    # the months' expected costs add up to the future claims' reserve of the products
    assert table["expected_cost"].sum() == pytest.approx(booked.by_product["reserve_future_claims"].sum(), rel=1e-12)
    assert (table["currency"] == "XXX").all()
    # the current / non-current parts' intervals, by hand: (drawn part + its other claims) x its inflation
    # factor + what the part books beyond its future claims (open claims, handling: none here)
    prediction.reserve_by_product = prediction.reserve_by_product.assign(
        reserve_current_lower=[200.0, 0.0], reserve_current_median=[300.0, 200.0], reserve_current_upper=[700.0, 500.0],
        reserve_non_current_lower=[0.0, 0.0], reserve_non_current_median=[100.0, 0.0],
        reserve_non_current_upper=[300.0, 0.0],
    )
    split, _ = with_prediction_intervals(booked, prediction, as_of)
    a = split.by_product.set_index("product").loc["A"]
    assert a["reserve_current_lower"] == pytest.approx(round((200.0 + 50.0) * factor.iloc[0], 2), abs=1e-9)
    assert a["reserve_current_upper"] == pytest.approx(round((700.0 + 50.0) * factor.iloc[0], 2), abs=1e-9)
    assert a["reserve_non_current_upper"] == pytest.approx(round(300.0 * factor.iloc[1], 2), abs=1e-9)
    assert a["reserve_current"] == pytest.approx(350.0 * factor.iloc[0], rel=1e-12)  # inside its interval
    assert a["reserve_current_lower"] < a["reserve_current"] < a["reserve_current_upper"]
    without, _ = with_prediction_intervals(booked, prediction)  # no as-of date: no split intervals
    assert without.by_product["reserve_current_lower"].isna().all()
    # a run with no cost per claim anywhere: an empty table with its columns
    unpriced = book_reserve(_summary(), _no_observed_costs(), _forecast({months[0]: 1.0}), {"A": "forecast (weibull)"},
                            {"A"}, ReserveSettings(), as_of_date=as_of)
    empty = reserve_by_calendar_month(unpriced, SimpleNamespace(cost_by_month=pd.DataFrame()), as_of)
    assert empty.empty and "cost_upper" in empty.columns


# --- configuration ----------------------------------------------------------------------------------------

def test_reserve_keys_parse_and_reject_what_they_cannot_mean():
    settings = settings_from_document(
        {"reserve": {"currency": "chf", "annual_inflation_rate": 0.025, "discount_rate_by_year": [0.06, 0.07, 0.07]}},
        "settings.toml",
    )["reserve"]
    assert settings.currency == "CHF"
    assert settings.annual_inflation_rate == 0.025
    assert [settings.discount_rate_for_year(k) for k in (1, 2, 3, 9)] == [0.06, 0.07, 0.07, 0.07]
    defaults = ReserveSettings()
    assert (defaults.currency, defaults.annual_inflation_rate, defaults.annual_discount_rate) == ("XXX", 0.0, 0.0)
    assert defaults.discount_rate_for_year(5) == 0.0
    for table, message in (
        ({"currency": "EURO"}, "reserve.currency must be a three-letter currency code"),
        ({"currency": "E1R"}, "reserve.currency must be a three-letter currency code"),
        ({"annual_inflation_rate": 3}, r"reserve.annual_inflation_rate must be a number in \[-0.5, 1\]"),
        ({"annual_discount_rate": True}, "reserve.annual_discount_rate must be a number"),
        ({"discount_rate_by_year": [0.06, "7%"]}, "reserve.discount_rate_by_year must be a list"),
        ({"annual_discount_rate": 0.04, "discount_rate_by_year": [0.06]}, "both set"),
    ):
        with pytest.raises(ConfigError, match=message):
            settings_from_document({"reserve": table}, "settings.toml")


# --- the run report ---------------------------------------------------------------------------------------

def test_the_report_shows_the_currency_beside_every_reserve_amount(demo_run_copy):
    report = (demo_run_copy / "report.md").read_text(encoding="utf-8")
    section = report.split("## Reserve by product", 1)[1].split("\n## ", 1)[0]
    money = {"cost_to_date", "cost_per_claim", "reserve", "reserve_interval", "added_by_flagged_months", "current",
             "non_current", "reserve_discounted", "current_discounted", "non_current_discounted",
             "future_claims_reserve", "open_claims_reserve", "handling_reserve", "current_interval",
             "non_current_interval"}
    tables = [block for block in section.split("\n\n") if block.startswith("| product |")]
    assert len(tables) == 2  # the reserve, and when it falls due
    for block in tables:
        header, _, *rows = block.splitlines()
        names = [c.strip() for c in header.strip("|").split("|")]
        assert len(rows) == 3  # QCP-140, QDS-210, QHT-360
        for line in rows:
            cells = dict(zip(names, (c.strip() for c in line.strip("|").split("|"))))
            shown = [cells[name] for name in names if name in money]
            assert shown and all(text.endswith(" XXX") for text in shown), line
    # the demo's total: future claims 1,371,177.51 + its 304 open claims 34,662.46 + handling 0 (issue 10; it was
    # 1,367,955.36 before open claims: the future claims moved as the open claims' estimates left the mean cost)
    assert "Total reserve over products with a forecast: 1,405,839.97 XXX" in section
    # the discounting sentence says its rate (the text had "{discount_text}" unfilled: found in this stop)
    assert "{" not in section and "reserve_discounted = each month's amount discounted at 0.00% a year" in section
    # each part's interval holds its amount (demo: QCP-140 current 93,857.79 in 88,770.07 to 98,758.30)
    by_product = pd.read_parquet(demo_run_copy / "reserve_by_product.parquet")
    for part in ("reserve_current", "reserve_non_current"):
        assert ((by_product[f"{part}_lower"] < by_product[part]) & (by_product[part] < by_product[f"{part}_upper"])).all()
    assert set(pd.read_parquet(demo_run_copy / "reserve_by_product.parquet")["currency"]) == {"XXX"}
