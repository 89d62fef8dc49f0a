"""Expected future returns: closed forms, calendar placement and a published prediction."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from warranty_forecast.stages.forecast import expected_failures_within, expected_future_returns, forecast_by_month
from warranty_forecast.lifecore.families import WEIBULL
from warranty_forecast.lifecore.fitter import Fitter
from closed_forms import weibull_log_survival  # tests/closed_forms.py
import reference_values as ref  # tests/ is on sys.path under pytest

DAYS = 365.25 / 12  # days in a month of age


class Weibull:
    def __init__(self, shape: float, scale: float) -> None:
        self.shape, self.scale = shape, scale

    def log_survival(self, t):
        return weibull_log_survival(t, self.shape, self.scale)


def suspension_rows(**columns) -> pd.DataFrame:
    base = {
        "product": ["P"],
        "build_month": [dt.date(2024, 1, 1)],
        "sale_month": [dt.date(2024, 1, 1)],
        "warranty_months": [5],
        "warranty_start_date": [dt.date(2024, 1, 1)],
        "observed_age_months": [2.5],
        "is_in_channel": [False],
        "units": [1000],
        "suspensions": [1000.0],
    }
    base.update({key: [value] for key, value in columns.items()})
    return pd.DataFrame(base)


def test_exponential_total_and_months_match_closed_form():
    # common practice, no source: with shape 1 the life is memoryless, so the expected returns over
    # the rest of the warranty are s * (1 - exp(-(W - a) / scale)) and month k gets the interval share.
    # Months in service on the day grid (hand arithmetic, L = 30.4375 days): month 3 ends at 92 days of
    # age, month 4 at 122, month 5 (the warranty's last) at 153 days = 5.0267 months.
    model = Weibull(1.0, 50.0)
    detail = expected_future_returns(suspension_rows(), {"P": model})
    assert detail["months_in_service"].tolist() == [3, 4, 5]
    ends = [92 / DAYS, 122 / DAYS, 153 / DAYS]
    expected_intervals = [(2.5, ends[0]), (ends[0], ends[1]), (ends[1], ends[2])]
    for (lo, hi), value in zip(expected_intervals, detail["expected_returns"]):
        assert value == pytest.approx(1000 * (np.exp(-(lo - 2.5) / 50) - np.exp(-(hi - 2.5) / 50)), rel=1e-12)
    assert detail["expected_returns"].sum() == pytest.approx(1000 * -np.expm1(-(ends[2] - 2.5) / 50), rel=1e-12)
    # midpoints 2.75, 3.5 and 4.5 months after 2024-01-01 fall in March, April and May
    assert [m.date() for m in pd.to_datetime(detail["month"])] == [
        dt.date(2024, 3, 1), dt.date(2024, 4, 1), dt.date(2024, 5, 1),
    ]


def test_weibull_conditional_probability_matches_direct_formula():
    # common practice, no source: P(fail in (lo, hi] | alive at a) = (R(lo) - R(hi)) / R(a)
    shape, scale = 2.3, 40.0
    detail = expected_future_returns(suspension_rows(observed_age_months=0.4, warranty_months=3), {"P": Weibull(shape, scale)})
    survival = lambda t: np.exp(-((t / scale) ** shape))  # noqa: E731
    ends = [31 / DAYS, 61 / DAYS, 92 / DAYS]  # months 1-3 on the day grid (hand arithmetic)
    direct = [(survival(lo) - survival(hi)) / survival(0.4) * 1000
              for lo, hi in [(0.4, ends[0]), (ends[0], ends[1]), (ends[1], ends[2])]]
    assert detail["expected_returns"].tolist() == pytest.approx(direct, rel=1e-10)


def test_mature_rows_products_without_model_and_channel_units():
    rows = pd.concat(
        [
            suspension_rows(observed_age_months=153 / DAYS),  # at the end of month 5's cover: nothing left
            suspension_rows(product="Q"),  # no model for Q
            suspension_rows(observed_age_months=0.0, warranty_start_date=dt.date(2024, 2, 10)),  # in channel
        ],
        ignore_index=True,
    )
    detail = expected_future_returns(rows, {"P": Weibull(1.0, 50.0)})
    assert set(detail["product"]) == {"P"}
    assert detail["months_in_service"].tolist() == [1, 2, 3, 4, 5]
    assert detail["expected_returns"].sum() == pytest.approx(1000 * -np.expm1(-(153 / DAYS) / 50), rel=1e-12)
    by_month = forecast_by_month(detail)
    # 2024-02-10 is day 10 of 29: coordinate 1 + 9/29; midpoints 0.5..4.5 months -> Feb .. Jun
    assert by_month["month"].tolist() == [dt.date(2024, m, 1) for m in (2, 3, 4, 5, 6)]


def test_bearing_cage_prediction_of_new_failures_in_300_hours():
    # Meeker & Escobar (1998), Table 12.1 (value from memory: 5.057; 5.058 recomputed): expected failures
    # among the 1,697 surviving bearing cages if each runs 300 more hours, under the Weibull MLE.
    data = ref.reference_life_data("bearing_cage.csv")
    fit = Fitter(WEIBULL, min_returns=1).fit(data)
    value = expected_failures_within(fit, data.suspension_ages, data.suspension_counts, 300.0)
    assert value == pytest.approx(ref.BEARING_NEW_FAILURES_300H, abs=5e-4)


def test_a_flagged_build_month_is_forecast_with_its_own_model_and_the_others_with_the_products():
    # two build months of one product; the second has its own life (e.g. a flagged month): its rows must
    # be exactly what its model alone gives, the first month's exactly what the product's model gives
    january, february = dt.date(2024, 1, 1), dt.date(2024, 2, 1)
    rows = pd.concat([suspension_rows(), suspension_rows(build_month=february, sale_month=february)], ignore_index=True)
    product, own = Weibull(1.0, 50.0), Weibull(1.0, 10.0)
    detail = expected_future_returns(rows, {"P": product}, {("P", february): own})
    alone = expected_future_returns(rows[rows["build_month"] == february], {"P": own})
    plain = expected_future_returns(rows[rows["build_month"] == january], {"P": product})
    by_month = detail.groupby("build_month")["expected_returns"].sum()
    assert by_month[february] == pytest.approx(alone["expected_returns"].sum(), rel=1e-15)
    assert by_month[january] == pytest.approx(plain["expected_returns"].sum(), rel=1e-15)
    # memoryless closed form (common practice, no source): 1000 (1 - exp(-(b_5 - 2.5) / 10)) for the own
    # life, b_5 = 153 days the end of the warranty's cover on the day grid
    assert by_month[february] == pytest.approx(1000 * -np.expm1(-(153 / DAYS - 2.5) / 10), rel=1e-12)
    # a month model for a product without a model forecasts nothing (the product is reported as such)
    assert expected_future_returns(rows, {}, {("P", february): own}).empty


@pytest.mark.parametrize(
    "start",
    [dt.date(2025, 1, 1), dt.date(2025, 2, 1), dt.date(2024, 12, 31), dt.date(2025, 1, 31), dt.date(2026, 2, 1)],
)
def test_no_expected_return_falls_in_a_calendar_month_already_over(start):
    # common practice, no source: a forecast of returns still to come holds nothing before the day after the
    # as-of date. The demo (as of 2026-11-30) had 0.42 returns in 2026-11 (2.36 when issue 12 was filed):
    # a unit started 2025-01-01 and observed through 2026-11-30 (699 days in service) has its next month in
    # service (ages 699-701 days, midpoint 700 days = 2026-12-02) placed by adding 22.998 *calendar* months
    # to January 2025, which lands in November 2026 (calendar months between are shorter than 30.4375 days).
    as_of = dt.date(2026, 11, 30)
    days_in_service = (as_of - start).days + 1  # observed through the as-of date (lifecore.data.month_interval_ends)
    rows = suspension_rows(
        warranty_start_date=start, warranty_months=24, observed_age_months=days_in_service / DAYS
    )
    detail = expected_future_returns(rows, {"P": Weibull(1.5, 40.0)})
    assert len(detail) and (detail["expected_returns"] > 0).all()
    months = [m.date() for m in pd.to_datetime(detail["month"])]
    assert min(months) == dt.date(2026, 12, 1)
    # each piece sits in the calendar month of the day its age interval's midpoint is reached (hand rule:
    # start + floor(midpoint in days) days; day d after the start is age [d, d + 1) days)
    from warranty_forecast.lifecore.data import month_interval_ends

    lower, upper = month_interval_ends(detail["months_in_service"].to_numpy())
    lower = np.maximum(lower, days_in_service / DAYS)
    for lo, hi, month in zip(lower, upper, months):
        day = start + dt.timedelta(days=int(np.floor((lo + hi) / 2 * DAYS)))
        assert month == day.replace(day=1)
