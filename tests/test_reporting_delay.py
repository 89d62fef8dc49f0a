"""Failures incurred but not yet reported: the delay estimator under right truncation, the reported share
of each cell, the delay-corrected Weibull fit (EM on the likelihood of Kalbfleisch, Lawless & Robinson
1991) and the claim_reporting_delays SQL model.

Simulated data are seeded and invented (no source needed); each check names its source beside it.
"""

from __future__ import annotations

import datetime as dt

import duckdb
import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.lifecore.data import DAYS_PER_MONTH
from warranty_forecast.stages import sql_runner
from warranty_forecast.stages.reporting_delay import (
    DEFAULT_NEGLIGIBLE_SHIFT,
    NONE,
    POOLED,
    PRODUCT,
    ReportingDelay,
    correct_for_reporting_delay,
    estimate_reporting_delay,
    klr_log_likelihood,
    reported_share,
    reporting_delays_by_product,
)

AS_OF = dt.date(2024, 12, 31)


def delay_frame(rows: list[tuple[int, int, float]]) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["delay_days", "observable_days", "claims"])


# ------------------------------------------------------------------------------- the delay estimator


def test_reverse_time_product_limit_estimate_matches_a_hand_computation():
    # Hand computation (Lagakos, Barraj & De Gruttola 1988, Biometrika 75: G(d) = prod_{s > d} (1 - n_s / N_s),
    # N_s = #{delay <= s <= window}), delays with their windows: (0,5) (1,1) (1,3) (2,2) (3,10) (2,4).
    # n = 1, 2, 2, 1 at s = 0..3.  N_1 = #{(0,5), (1,1), (1,3)} = 3;  N_2 = #{(0,5), (1,3), (2,2), (2,4)} = 4;
    # N_3 = #{(0,5), (1,3), (3,10), (2,4)} = 4.
    # G(3) = 1;  G(2) = 1 - 1/4 = 3/4;  G(1) = 3/4 (1 - 2/4) = 3/8;  G(0) = 3/8 (1 - 2/3) = 1/8.
    delays = delay_frame([(0, 5, 1), (1, 1, 1), (1, 3, 1), (2, 2, 1), (3, 10, 1), (2, 4, 1)])
    estimate = estimate_reporting_delay(delays)
    np.testing.assert_allclose(estimate.cdf, [1 / 8, 3 / 8, 3 / 4, 1.0], rtol=0, atol=1e-15)
    assert estimate.source == PRODUCT and estimate.claims == 6 and estimate.support_days == 3
    # the truncation matters: the plain empirical distribution of these delays is 1/6, 1/2, 5/6, 1
    # mean from the probabilities 1/8, 2/8, 3/8, 2/8: (0 + 2 + 6 + 6) / 8 = 1.75 days
    assert estimate.mean_days == pytest.approx(1.75)
    assert estimate.quantile_days(0.5) == 2
    np.testing.assert_allclose(estimate.reported_within(np.array([-1, 0, 2, 7])), [0.0, 1 / 8, 3 / 4, 1.0])


def test_without_truncation_the_estimate_is_the_empirical_distribution_function():
    # Common practice, no source: with every window beyond the longest delay the reverse-time product
    # telescopes to #{delay <= d} / n.
    rng = np.random.default_rng(11)
    delay = rng.geometric(0.15, 400) - 1
    counts = rng.integers(1, 4, 400).astype(float)
    delays = delay_frame(list(zip(delay, np.full(400, 10_000), counts)))
    estimate = estimate_reporting_delay(delays, max_delay_days=10_000)
    days = np.arange(delay.max() + 1)
    empirical = np.array([counts[delay <= d].sum() for d in days]) / counts.sum()
    np.testing.assert_allclose(estimate.cdf, empirical, rtol=1e-12)


def test_delays_beyond_the_cap_are_left_out_and_counted_without_changing_the_estimate_below_it():
    # The factors at s <= cap use only delays <= s (the hand sample above, plus two late claims).
    delays = delay_frame([(0, 5, 1), (1, 1, 1), (1, 3, 1), (2, 2, 1), (3, 10, 1), (2, 4, 1), (400, 500, 2)])
    estimate = estimate_reporting_delay(delays, max_delay_days=90)
    np.testing.assert_allclose(estimate.cdf, [1 / 8, 3 / 8, 3 / 4, 1.0], atol=1e-15)
    assert estimate.claims_beyond_cap == 2 and "left out" in estimate.note


def test_impossible_delays_are_refused():
    with pytest.raises(ValueError, match="delay_days must be >= 0"):
        estimate_reporting_delay(delay_frame([(-1, 3, 1)]))
    with pytest.raises(ValueError, match="observable_days must be >= delays.delay_days"):
        estimate_reporting_delay(delay_frame([(5, 3, 1)]))
    with pytest.raises(ValueError, match="whole days"):
        estimate_reporting_delay(delay_frame([(1.5, 3, 1)]))
    with pytest.raises(ValueError, match="no claim"):
        estimate_reporting_delay(delay_frame([(200, 300, 1)]), max_delay_days=180)


def test_thin_products_pool_all_products_and_thinner_data_get_no_correction():
    many = [("A", d % 7, 60, 1.0) for d in range(60)]
    few = [("B", 2, 30, 1.0), ("B", 5, 40, 1.0)]
    frame = pd.DataFrame(many + few, columns=["product", "delay_days", "observable_days", "claims"])
    delays = reporting_delays_by_product(frame, ["A", "B", "C"], min_claims=50)
    assert delays["A"].source == PRODUCT and delays["A"].claims == 60
    assert delays["B"].source == POOLED and delays["B"].claims == 62 and "pooled" in delays["B"].note
    assert delays["C"].source == POOLED
    pooled = estimate_reporting_delay(frame)
    np.testing.assert_allclose(delays["B"].cdf, pooled.cdf)
    none = reporting_delays_by_product(frame, ["A", "B"], min_claims=100)
    assert none["B"].source == NONE and not none["B"].corrects and "no correction" in none["B"].note


# ------------------------------------------------------------------------------------ reported share


def test_reported_share_is_the_mean_of_g_over_the_days_of_each_cell():
    # Hand computation on the day grid (a failure d days after the start, age [d, d + 1) days, is in month
    # max(1, ceil(d / L)), L = 365.25/12: month 1 holds d = 0..30, month 2 d = 31..60; a row D days past its
    # start at the as-of date has D + 1 days in service, failures d = 0..D): G(0) = 0.5, G(1) = 0.75, G(2) = 1.
    delay = ReportingDelay("P", PRODUCT, np.array([0.5, 0.75, 1.0]), 10.0, 0.0, 180)
    rows = pd.DataFrame({
        "product": "P", "build_month": dt.date(2024, 11, 1), "sale_month": dt.date(2024, 11, 1),
        "warranty_months": [24, 1, 1],
        # 40 days before the as-of date (41 days in service): d = 39 and 40 (lags 1 and 0) lie in month 2,
        # which ends at the observed age 41 days: d = 31..40, 10 days, 1 - w = (0.25 + 0.5) / 10.
        # 31 days before, warranty 1 month (observed to its end, 31 days): d = 30 has lag 1: 1 - w = 0.25 / 31
        # in month 1 (d = 0..30). 100 days before, warranty 1 month: d = 0..30 have lags 70..100: nothing.
        "warranty_start_date": [AS_OF - dt.timedelta(days=days) for days in (40, 31, 100)],
        "observed_age_months": [41 / DAYS_PER_MONTH, 31 / DAYS_PER_MONTH, 31 / DAYS_PER_MONTH],
        "suspensions": [100.0, 50.0, 10.0],
    }, index=[7, 8, 9])
    share = reported_share(rows, {"P": delay}, AS_OF)
    assert share["row"].tolist() == [7, 8]
    assert share["months_in_service"].tolist() == [2, 1]
    assert share["days"].tolist() == [10, 31]
    np.testing.assert_allclose(share["reported_share"], [1 - 0.75 / 10, 1 - 0.25 / 31])
    np.testing.assert_allclose(share["interval_lower"], [31 / DAYS_PER_MONTH, 0.0])
    np.testing.assert_allclose(share["interval_upper"], [41 / DAYS_PER_MONTH, 31 / DAYS_PER_MONTH])


def test_an_observed_age_past_the_as_of_date_is_refused():
    delay = ReportingDelay("P", PRODUCT, np.array([0.5, 1.0]), 10.0, 0.0, 180)
    rows = pd.DataFrame({
        "product": ["P"], "build_month": [dt.date(2024, 11, 1)], "sale_month": [dt.date(2024, 11, 1)],
        "warranty_months": [24], "warranty_start_date": [AS_OF - dt.timedelta(days=10)],
        "observed_age_months": [20 / DAYS_PER_MONTH], "suspensions": [5.0],
    })
    with pytest.raises(ValueError, match="runs past the as-of date"):
        reported_share(rows, {"P": delay}, AS_OF)


# ---------------------------------------------------------------------- the corrected fit, simulated


def simulate(seed: int, shape: float, scale: float, *, build_months: int = 24, units_per_month: int = 3000,
             delay_mean_days: float = 30.0, warranty: int = 24):
    """Build months 2023-01 .. 2024-12 of `units_per_month` units each, warranty start 0-27 days into the
    build month, Weibull lives (months), failure dated d = floor(life L) days after the start (the day
    grid: age [d, d + 1) days), observed through the as-of date (D + 1 days in service), delay floor(Exp(mean))
    whole days (G(d) = 1 - exp(-(d + 1) / mean)); a failure within the warranty window is a counted
    return when its claim comes by the as-of date, unreported otherwise. Returns the three frames as
    the SQL outputs hold them, the number of failures not yet reported, and of counted returns."""
    rng = np.random.default_rng(seed)
    as_of = np.datetime64(AS_OF, "D")
    build = np.repeat(np.datetime64("2023-01", "M") + np.arange(build_months), units_per_month)
    start = build.astype("datetime64[D]") + rng.integers(0, 28, build.size)
    day = np.floor(scale * rng.weibull(shape, build.size) * DAYS_PER_MONTH).astype(np.int64)
    delay = np.floor(rng.exponential(delay_mean_days, build.size)).astype(np.int64)
    window = np.minimum((as_of - start).astype(np.int64), int(np.floor(warranty * DAYS_PER_MONTH)))
    failed = day <= window
    counted = failed & (start + day + delay <= as_of)
    month = np.maximum(1, (48 * day + 1460) // 1461)
    build_month = build.astype("datetime64[D]").astype(object)
    returns = pd.DataFrame({"build_month": build_month[counted], "months_in_service": month[counted]})
    fit_returns = returns.groupby(["build_month", "months_in_service"], as_index=False).size()
    fit_returns = fit_returns.rename(columns={"size": "returns"})
    units = pd.DataFrame({
        "build_month": build_month, "warranty_start_date": start.astype(object),
        "observed_age_months": (window + 1) / DAYS_PER_MONTH, "counted": counted,
    })
    survival = units.groupby("build_month")["counted"].mean()  # survivors shared by units, as the SQL does
    fit_suspensions = units.groupby(
        ["build_month", "warranty_start_date", "observed_age_months"], as_index=False
    ).size()
    fit_suspensions = fit_suspensions.rename(columns={"size": "units"})
    fit_suspensions["suspensions"] = fit_suspensions["units"] * (1.0 - fit_suspensions["build_month"].map(survival))
    for frame in (fit_returns, fit_suspensions):
        frame.insert(0, "product", "P")
        frame.insert(2, "sale_month", frame["build_month"])
        frame.insert(3, "warranty_months", warranty)
    observable = (as_of - (start + day)).astype(np.int64)[counted]
    delays = pd.DataFrame({"delay_days": delay[counted], "observable_days": observable})
    delays = delays.groupby(["delay_days", "observable_days"], as_index=False).size().rename(columns={"size": "claims"})
    delays.insert(0, "product", "P")
    return fit_returns, fit_suspensions, delays, int((failed & ~counted).sum()), int(counted.sum())


@pytest.fixture(scope="module")
def simulated():
    shape, scale = 1.5, 60.0
    fit_returns, fit_suspensions, delays, unreported, counted = simulate(0, shape, scale)
    correction = correct_for_reporting_delay(
        fit_returns, fit_suspensions, delays, AS_OF, LifeModelSettings(), {"P": 24}
    )
    return shape, scale, fit_returns, fit_suspensions, delays, unreported, counted, correction


def test_the_delay_estimate_recovers_the_simulated_distribution(simulated):
    *_, correction = simulated
    delay = correction.delays["P"]
    days = np.arange(60)
    truth = 1.0 - np.exp(-(days + 1) / 30.0)  # floor of an exponential of mean 30 days
    # ~6,200 claims, seed 0: the estimate is within 0.0099 of the truth over the first 60 days; the
    # empirical distribution of the seen delays (truncation ignored) is 0.044 off (at day 25), too short
    error = np.max(np.abs(delay.cdf[days] - truth))
    _, _, _, _, delays, *_ = simulated
    naive = np.array([delays.loc[delays["delay_days"] <= d, "claims"].sum() for d in days]) / delays["claims"].sum()
    assert error < 0.02 and np.max(naive - truth) > 0.035


def test_the_corrected_fit_recovers_the_truth_and_the_uncorrected_one_is_biased(simulated):
    shape, scale, *_, correction = simulated
    fit = correction.products["P"]
    true_fraction = 1.0 - np.exp(-((24.0 / scale) ** shape))  # F(24) = 0.2235
    uncorrected, bounds_u = fit.uncorrected.fit, fit.uncorrected.lr_bounds
    corrected, bounds_c = fit.corrected.fit, fit.corrected.lr_bounds
    # seed 0, 72,000 units, 6,197 counted returns, delays mean ~30 days:
    # uncorrected: shape 1.464 (LR 1.433, 1.496), scale 66.0 (63.8, 68.4), F(24) 0.2033 (0.1981, 0.2084)
    # corrected:   shape 1.522 (LR 1.491, 1.553), scale 58.7 (57.0, 60.6), F(24) 0.2260 (0.2206, 0.2314)
    # truth:       shape 1.5, scale 60, F(24) 0.2235
    assert not bounds_u.scale[0] <= scale <= bounds_u.scale[1]
    assert not bounds_u.cdf[24.0][0] <= true_fraction <= bounds_u.cdf[24.0][1]
    assert float(uncorrected.cdf(np.array([24.0]))[0]) < true_fraction - 0.015
    assert bounds_c.shape[0] <= shape <= bounds_c.shape[1]
    assert bounds_c.scale[0] <= scale <= bounds_c.scale[1]
    assert bounds_c.cdf[24.0][0] <= true_fraction <= bounds_c.cdf[24.0][1]
    assert corrected.shape == pytest.approx(1.522, abs=0.002) and uncorrected.shape == pytest.approx(1.464, abs=0.002)


def test_the_expected_unreported_failures_match_the_simulated_truth(simulated):
    *_, unreported, counted, correction = simulated
    fit = correction.products["P"]
    # seed 0: 613 failures not yet reported, 609.7 expected; allow 3 Poisson standard deviations
    assert abs(fit.expected_unreported - unreported) < 3.0 * np.sqrt(unreported)
    # every table carries the same total
    assert correction.unreported_by_failure_month["expected_unreported"].sum() == pytest.approx(fit.expected_unreported)
    assert correction.unreported_by_claim_month["expected_unreported"].sum() == pytest.approx(fit.expected_unreported)
    assert (correction.unreported_by_claim_month["month"] > AS_OF).all()
    assert (correction.unreported_by_failure_month["failure_month"] <= AS_OF).all()
    # the completed frames: returns up and suspensions down by the same amount, reported ones kept
    frames_returns, frames_suspensions = correction.fit_returns, correction.fit_suspensions
    assert frames_returns["reported_returns"].sum() == counted
    assert frames_returns["expected_unreported_returns"].sum() == pytest.approx(fit.expected_unreported)
    lost = frames_suspensions["suspensions_reported"].sum() - frames_suspensions["suspensions"].sum()
    assert lost == pytest.approx(fit.expected_unreported)
    assert fit.data.n_returns == pytest.approx(counted + fit.expected_unreported)


def test_em_climbs_the_klr_likelihood_to_its_maximum(simulated):
    _, _, fit_returns, fit_suspensions, *_, correction = simulated
    fit = correction.products["P"]
    assert fit.converged and 1 < fit.iterations < 50
    assert np.all(np.diff(fit.log_likelihoods) > -1e-6)  # EM never lowers the observed-data likelihood
    # the EM fixed point against a direct maximisation of the same likelihood (scipy Nelder-Mead)
    log_lik = klr_log_likelihood(fit_returns, fit_suspensions, fit.delay, AS_OF)
    direct = optimize.minimize(
        lambda theta: -log_lik(theta), fit.uncorrected.fit.theta, method="Nelder-Mead",
        options={"xatol": 1e-8, "fatol": 1e-8, "maxiter": 4000},
    )
    np.testing.assert_allclose(fit.corrected.fit.theta, direct.x, atol=2e-5)
    assert log_lik(fit.corrected.fit.theta) == pytest.approx(fit.log_likelihoods[-1], abs=1e-6)
    assert log_lik(fit.corrected.fit.theta) >= -direct.fun - 1e-6


def test_without_a_delay_distribution_the_fit_is_left_as_it_was():
    fit_returns, fit_suspensions, delays, *_ = simulate(1, 1.5, 60.0, build_months=12, units_per_month=1000)
    correction = correct_for_reporting_delay(
        fit_returns, fit_suspensions, delays.head(3), AS_OF, LifeModelSettings(), {"P": 24}, min_claims=50
    )
    fit = correction.products["P"]
    assert fit.delay.source == NONE and fit.expected_unreported == 0.0
    assert fit.corrected is fit.uncorrected and "no correction" in fit.note
    assert correction.unreported_by_failure_month.empty
    assert correction.table.loc[0, "delay_source"] == NONE


def test_a_negligible_correction_skips_the_refit_but_still_completes_the_frames():
    # a thin line (seed 3: 15 units a month, 27 counted returns, delays mean 5 days): one EM step would move
    # the fit by 0.058 standard errors, under the tenth taken as negligible
    fit_returns, fit_suspensions, delays, *_ = simulate(3, 1.5, 60.0, units_per_month=15, delay_mean_days=5.0)
    settings, warranty = LifeModelSettings(), {"P": 24}
    skipped = correct_for_reporting_delay(fit_returns, fit_suspensions, delays, AS_OF, settings, warranty, min_claims=10)
    fit = skipped.products["P"]
    assert fit.iterations == 0 and fit.corrected is fit.uncorrected and "not re-estimated" in fit.note
    # the failures not yet reported are still imputed (at the uncorrected fit) and reach every table
    assert 0.0 < fit.expected_unreported < 1.0
    assert skipped.fit_returns["expected_unreported_returns"].sum() == pytest.approx(fit.expected_unreported)
    assert skipped.unreported_by_claim_month["expected_unreported"].sum() == pytest.approx(fit.expected_unreported)
    assert fit.data.n_returns == pytest.approx(fit.uncorrected_data.n_returns + fit.expected_unreported)
    # the full EM (the skip turned off) lands within the promised tenth of a standard error of the
    # uncorrected fit, in the Mahalanobis distance of the uncorrected fit's covariance
    full = correct_for_reporting_delay(
        fit_returns, fit_suspensions, delays, AS_OF, settings, warranty, min_claims=10, negligible_shift=0.0
    ).products["P"]
    assert full.iterations >= 1
    move = np.asarray(full.corrected.fit.theta) - np.asarray(fit.uncorrected.fit.theta)
    distance = float(np.sqrt(move @ np.linalg.solve(np.asarray(fit.uncorrected.fit.covariance), move)))
    assert distance < DEFAULT_NEGLIGIBLE_SHIFT
    assert fit.expected_unreported == pytest.approx(full.expected_unreported, rel=0.05)


def test_the_negligible_shift_keeps_a_95_percent_interval_near_its_level():
    # Cochran (1977, Sampling Techniques, 3rd ed., section 1.8, from memory): a bias below a tenth of the
    # standard error is negligible. The miss rate of a two-sided 95% normal interval under that bias
    # (scipy.stats.norm): 5.11%, against 5.00% without it
    z = stats.norm.ppf(0.975)
    b = DEFAULT_NEGLIGIBLE_SHIFT
    miss = stats.norm.sf(z - b) + stats.norm.cdf(-z - b)
    assert 0.05 < miss < 0.0512


def test_the_large_simulated_line_is_not_skipped(simulated):
    *_, correction = simulated
    fit = correction.products["P"]
    assert fit.iterations > 1 and fit.corrected is not fit.uncorrected and "not re-estimated" not in fit.note


def test_a_negative_negligible_shift_is_refused():
    fit_returns, fit_suspensions, delays, *_ = simulate(3, 1.5, 60.0, units_per_month=15, delay_mean_days=5.0)
    with pytest.raises(ValueError, match="negligible_shift"):
        correct_for_reporting_delay(
            fit_returns, fit_suspensions, delays, AS_OF, LifeModelSettings(), {"P": 24}, negligible_shift=-0.1
        )


# ------------------------------------------------------------------------------- the SQL model alone


def test_claim_reporting_delays_model_on_hand_written_claims():
    # Hand computation from the model's header (common practice, no source): delay = claim - failure,
    # window = as-of - failure, capped at the longest delay of any product (10 days here).
    con = duckdb.connect(":memory:")
    try:
        con.execute(
            "create table claims_assigned_to_sale_month_groups"
            " (product varchar, failure_date date, claim_date date, is_return boolean)"
        )
        rows = [
            ("A", "2024-12-01", "2024-12-05", True),  # delay 4, window 30 -> 10
            ("A", "2024-12-29", "2024-12-30", True),  # delay 1, window 2
            ("A", "2024-11-01", "2024-11-11", True),  # delay 10, window 60 -> 10
            ("A", "2024-10-01", "2024-11-20", False),  # not a counted return: left out
            ("B", "2024-12-20", "2024-12-22", True),  # delay 2, window 11 -> 10
            ("B", "2024-12-20", "2024-12-22", True),
        ]
        con.executemany("insert into claims_assigned_to_sale_month_groups values (?, ?, ?, ?)", rows)
        sql_runner.run_model(con, "outputs/claim_reporting_delays", {"as_of_date": AS_OF})
        got = con.execute(
            "select product, delay_days, observable_days, claims from claim_reporting_delays order by all"
        ).fetchall()
    finally:
        con.close()
    assert got == [("A", 1, 2, 1), ("A", 4, 10, 1), ("A", 10, 10, 1), ("B", 2, 10, 2)]
