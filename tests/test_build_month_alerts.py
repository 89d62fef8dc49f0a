"""The build-month alert stage: its statistics against scipy and hand-worked values, a seeded simulated
product with one bad build month, and the shipped demo data."""

from __future__ import annotations

import datetime as dt
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from warranty_forecast.config import AlertSettings, LifeModelSettings, load_config
from warranty_forecast.lifecore.data import DAYS_PER_MONTH, month_interval_ends
from warranty_forecast.lifecore.fitter import Fitter
from warranty_forecast.stages.build_month_alerts import (
    BUILD_MONTH_ALERT_COLUMNS,
    benjamini_hochberg,
    find_bad_build_months,
    garwood_ratio_interval,
    poisson_excess_p_value,
    score_build_months,
)
from warranty_forecast.stages.fitting import life_data_by_product

ROOT = Path(__file__).resolve().parents[1]


# -- exact Poisson p-value and Garwood interval ---------------------------------------------------------


def test_poisson_p_value_matches_scipy_and_a_hand_computed_value():
    observed = np.array([0, 1, 3, 10, 40, 250])
    expected = np.array([2.0, 0.5, 1.0, 4.2, 25.0, 180.0])
    p = poisson_excess_p_value(observed, expected)
    # reference: scipy.stats.poisson.sf(O - 1, E), P(X >= O)
    reference = np.where(observed > 0, stats.poisson.sf(observed - 1, expected), 1.0)
    np.testing.assert_allclose(p, reference, rtol=1e-12)
    # by hand: P(X >= 3 | mean 1) = 1 - e^-1 (1 + 1 + 1/2) = 1 - 2.5/e
    assert p[2] == pytest.approx(1 - 2.5 / math.e, rel=1e-12)
    assert p[0] == 1.0  # O = 0: no evidence of excess


def test_garwood_limits_match_chi_square_quantiles_and_the_two_degree_of_freedom_closed_form():
    observed = np.array([0, 1, 5, 10, 100])
    expected = np.array([2.0, 1.0, 2.5, 10.0, 80.0])
    lower, upper = garwood_ratio_interval(observed, expected, 0.95)
    # reference: Garwood (1936), mean limits chi2.ppf(0.025, 2 O) / 2 and chi2.ppf(0.975, 2 O + 2) / 2,
    # from scipy.stats.chi2, divided by E
    with np.errstate(invalid="ignore"):
        ref_lower = np.where(observed > 0, stats.chi2.ppf(0.025, 2 * observed) / 2, 0.0) / expected
    ref_upper = stats.chi2.ppf(0.975, 2 * observed + 2) / 2 / expected
    np.testing.assert_allclose(lower, ref_lower, rtol=1e-12)
    np.testing.assert_allclose(upper, ref_upper, rtol=1e-12)
    # by hand: chi-square with 2 df is exponential with mean 2, so chi2.ppf(q, 2) / 2 = -ln(1 - q):
    # O = 0 upper mean limit -ln(0.025) = 3.68888, over E = 2; O = 1 lower mean limit -ln(0.975)
    assert upper[0] == pytest.approx(-math.log(0.025) / 2.0, rel=1e-12)
    assert lower[1] == pytest.approx(-math.log(0.975), rel=1e-12)
    assert lower[0] == 0.0


# -- Benjamini-Hochberg ---------------------------------------------------------------------------------


def test_benjamini_hochberg_q_values_against_hand_worked_step_up_examples():
    # Benjamini & Hochberg (1995), the step-up rule; worked by hand:
    # sorted p 0.005, 0.01, 0.03, 0.04, 0.20 (m = 5) -> p m / rank 0.025, 0.025, 0.05, 0.05, 0.20,
    # running minimum from the largest rank down leaves them as they are.
    q = benjamini_hochberg(np.array([0.01, 0.04, 0.03, 0.005, 0.20]))
    np.testing.assert_allclose(q, [0.025, 0.05, 0.05, 0.025, 0.20], rtol=1e-12)
    # sorted p 0.02, 0.021, 0.5 (m = 3) -> 0.06, 0.0315, 0.5; the step-up minimum pulls the first to 0.0315
    q = benjamini_hochberg(np.array([0.5, 0.021, 0.02]))
    np.testing.assert_allclose(q, [0.5, 0.0315, 0.0315], rtol=1e-12)
    # q never exceeds 1
    assert benjamini_hochberg(np.array([0.9, 0.95]))[0] == pytest.approx(0.95)


# -- a seeded simulated product with one bad build month --------------------------------------------------

SHAPE, SCALE = 1.2, 200.0  # months
BUILD_MONTHS = [dt.date(2023 + (m // 12), m % 12 + 1, 1) for m in range(24)]
BAD_MONTH = BUILD_MONTHS[14]
UNITS = 5000


def _lives(rng: np.random.Generator, n: int, early_hazard_factor: float, k: float = 3.0) -> np.ndarray:
    """Weibull lives whose hazard is multiplied by `early_hazard_factor` up to age k: cumulative hazard
    H*(t) = H(t) + (factor - 1) H(min(t, k)), H(t) = (t / SCALE)^SHAPE, inverted at an Exp(1) draw."""
    e = rng.exponential(size=n)
    h_k = (k / SCALE) ** SHAPE
    early = e <= early_hazard_factor * h_k
    h = np.where(early, e / early_hazard_factor, e - (early_hazard_factor - 1) * h_k)
    return SCALE * h ** (1 / SHAPE)


def simulated_product(seed: int, warranty: float = 24.0) -> tuple[pd.DataFrame, pd.DataFrame]:
    """fit_returns- and fit_suspensions-shaped tables: 24 build months of 5,000 units sold at once, the
    youngest 1 month in service, the bad month with twice the early (first 3 months) hazard. Day-granular
    as the pipeline sees dates: a unit n whole months in service is observed to the end of month n on the
    day grid; a failure at age T is dated floor(T L) days after the start, month max(1, ceil(d / L))."""
    rng = np.random.default_rng(seed)
    returns, suspensions = [], []
    for index, month in enumerate(BUILD_MONTHS):
        window = float(month_interval_ends(min(float(len(BUILD_MONTHS) - index), warranty))[1])
        life = _lives(rng, UNITS, 2.0 if month == BAD_MONTH else 1.0)
        failed = life < window
        day = np.floor(life[failed] * DAYS_PER_MONTH)
        mis, counts = np.unique(np.maximum(1, np.ceil(day / DAYS_PER_MONTH)).astype(int), return_counts=True)
        returns += [("P", month, int(m), int(c)) for m, c in zip(mis, counts)]
        suspensions.append(("P", month, window, UNITS, float(UNITS - failed.sum())))
    return (
        pd.DataFrame(returns, columns=["product", "build_month", "months_in_service", "returns"]),
        pd.DataFrame(suspensions, columns=["product", "build_month", "observed_age_months", "units", "suspensions"]),
    )


@pytest.fixture(scope="module")
def simulated():
    fit_returns, fit_suspensions = simulated_product(seed=20261202)
    pooled = Fitter("weibull").fit(life_data_by_product(fit_returns, fit_suspensions)["P"])
    alerts = find_bad_build_months(fit_returns, fit_suspensions, {"P": pooled}, AlertSettings(), LifeModelSettings())
    return pooled, alerts


def test_the_month_with_twice_the_early_hazard_is_flagged_and_no_other(simulated):
    _, alerts = simulated
    assert list(alerts.table.columns) == list(BUILD_MONTH_ALERT_COLUMNS)
    assert len(alerts.table) == len(BUILD_MONTHS)
    assert list(alerts.flagged["build_month"]) == [BAD_MONTH]
    bad = alerts.flagged.iloc[0]
    assert "first 3 months in service" in bad["reason"]
    assert bad["early_ratio_lower"] > 1.0 and bad["early_q_value"] <= 0.05
    assert len(alerts.warnings) == 1 and "build month 2024-03" in alerts.warnings[0]


def test_the_baseline_leaves_the_flagged_month_out_and_moves_toward_the_truth(simulated):
    pooled, alerts = simulated
    baseline = alerts.baselines["P"]
    assert baseline.excluded_build_months == (BAD_MONTH,)
    assert baseline.note == ""
    refit = baseline.fit
    assert abs(math.log(refit.shape / SHAPE)) < abs(math.log(pooled.shape / SHAPE))
    assert abs(math.log(refit.scale / SCALE)) < abs(math.log(pooled.scale / SCALE))


def test_a_ratio_below_the_floor_is_not_flagged_however_small_its_q():
    # 1,000,000 units each expecting F(12) of a Weibull: 3% more returns than expected gives a tiny q,
    # but a ratio of 1.03 is below min_ratio 1.5
    class Exponential:
        def cdf(self, t):
            return -np.expm1(self.log_survival(t))

        def log_survival(self, t):
            return -np.asarray(t, dtype=float) / 100.0

    months = [dt.date(2024, m, 1) for m in range(1, 5)]
    units = 1_000_000
    expected = units * -math.expm1(-12 / 100.0)
    counts = [round(expected * 1.03), round(expected), round(expected), round(expected)]
    suspensions = pd.DataFrame({"build_month": months, "observed_age_months": 12.0, "units": units,
                                "suspensions": [units - c for c in counts]})
    returns = pd.DataFrame({"build_month": months, "months_in_service": 6, "returns": counts})
    table = score_build_months(returns, suspensions, Exponential(), AlertSettings(), 0.95)
    assert table.loc[0, "window_q_value"] < 1e-10
    assert not table["is_flagged"].any()


# -- the demo data ----------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def demo_alerts(tmp_path_factory):
    from warranty_forecast.stages.build_month_alerts import alert_build_months
    from warranty_forecast.stages.life_models import fit_lives
    from warranty_forecast.stages.shaping import shape_extracts

    config = load_config(
        shipments_path=ROOT / "data_demo" / "shipments.parquet",
        claims_path=ROOT / "data_demo" / "claims.csv",
        out_dir=tmp_path_factory.mktemp("alerts") / "out",
        run_date=dt.date(2026, 12, 2),
    )
    shaped = shape_extracts(config)
    lives = fit_lives(shaped, config.life_model)
    return shaped, alert_build_months(
        shaped.fit_returns, shaped.fit_suspensions, lives, config.alerts, config.life_model,
        shaped.returns_by_build_month_and_code,
    )


def test_the_demo_flags_the_planted_bad_month_of_qcp_140(demo_alerts):
    _, alerts = demo_alerts
    flagged = alerts.flagged
    planted = flagged[(flagged["product"] == "QCP-140") & (flagged["build_month"] == dt.date(2025, 2, 1))]
    assert len(planted) == 1
    assert planted.iloc[0]["early_ratio_lower"] > 10 and planted.iloc[0]["window_ratio_lower"] > 3
    # No other month of any product (the check). Build month 2024-04 comes nearest: 16 returns in
    # its first 3 months in service against 6.5 expected (early p = 0.0012) but a whole-life hazard ratio
    # of 1.08 (p = 0.19); its month p (the smaller of the two, doubled) is 0.0024 and its BH q 0.071.
    assert list(flagged["build_month"]) == [dt.date(2025, 2, 1)]
    assert set(flagged["product"]) == {"QCP-140"}
    april = alerts.table[(alerts.table["product"] == "QCP-140") & (alerts.table["build_month"] == dt.date(2024, 4, 1))].iloc[0]
    assert april["month_q_value"] > 0.05 and april["early_p_value"] < 0.01
    row = planted.iloc[0]
    # both views carry the flag; the month's own scale (common shape) gives about 4 times the hazard
    assert "first 3 months in service" in row["reason"] and "own Weibull scale" in row["reason"]
    assert 3.0 < row["hazard_ratio_lower"] < row["hazard_ratio"] < row["hazard_ratio_upper"] < 5.0
    baseline = alerts.baselines["QCP-140"]
    assert dt.date(2025, 2, 1) in baseline.excluded_build_months
    # the generator's truth is shape 1.4, scale 400 months (data_demo/README.md); the pooled fit with the
    # planted month is 1.344 / 443; without it the shape moves toward the truth
    assert abs(baseline.fit.shape - 1.4) < abs(1.344 - 1.4)


def test_the_demo_against_the_generators_true_model_flags_only_the_planted_month(demo_alerts):
    # Judged against the true QCP-140 life (data_demo/README.md: Weibull shape 1.4, scale 400 months)
    # only 2025-02 is flagged too: build month 2024-04 (16 returns in the first 3 months in service against
    # 7.3 expected, p = 0.0036) is a chance excess.
    shaped, _ = demo_alerts

    class TrueQcp140:
        def log_survival(self, t):
            return -((np.asarray(t, dtype=float) / 400.0) ** 1.4)

        def cdf(self, t):
            return -np.expm1(self.log_survival(t))

    returns = shaped.fit_returns[shaped.fit_returns["product"] == "QCP-140"]
    suspensions = shaped.fit_suspensions[shaped.fit_suspensions["product"] == "QCP-140"]
    table = score_build_months(returns, suspensions, TrueQcp140(), AlertSettings(), 0.95)
    assert list(table.loc[table["is_flagged"], "build_month"]) == [dt.date(2025, 2, 1)]


def test_the_demo_points_each_flagged_month_at_its_failure_codes(demo_alerts):
    _, alerts = demo_alerts
    causes = alerts.causes
    assert set(zip(causes["product"], causes["build_month"])) == {("QCP-140", dt.date(2025, 2, 1))}
    planted = causes[causes["build_month"] == dt.date(2025, 2, 1)]
    top = planted.iloc[0]
    # the planted defect's code: 266 returns, none in the unflagged months, so none expected; 95.1% of the
    # month's excess (the rest: BEARING_NOISE, 62 returns against 48.3 expected)
    assert top["failure_code"] == "START_CAP_SHORT"
    assert (top["observed_returns"], top["expected_returns"]) == (266.0, 0.0)
    assert top["share_of_excess"] == pytest.approx(0.951, abs=1e-3)
    # each month's codes account for its observed returns; the expected ones for its expected returns
    # (every code of QCP-140 has baseline returns but START_CAP_SHORT, which has none)
    flagged = alerts.flagged.set_index("build_month")
    assert planted["observed_returns"].sum() == flagged.loc[dt.date(2025, 2, 1), "window_observed_returns"]
    # every code of QCP-140 but START_CAP_SHORT has baseline returns: the codes' expected returns add up
    # to the month's whole-window expected returns (the shares of the unflagged months sum to 1)
    assert planted["expected_returns"].sum() == pytest.approx(flagged.loc[dt.date(2025, 2, 1), "window_expected_returns"])
    flagged_warning = next(w for w in alerts.warnings if "build month 2025-02 flagged" in w)
    assert "top failure code START_CAP_SHORT: 266 returns where none were expected" in flagged_warning
    # START_CAP_SHORT is concentrated in the flagged month, and said so; no other code is
    sentence = "failure code START_CAP_SHORT: 266 of its 266 returns are in flagged build month(s) 2025-02"
    assert alerts.concentrated_codes == {("QCP-140", "START_CAP_SHORT"): sentence}
    assert any(w.startswith(f"product QCP-140, {sentence}") for w in alerts.warnings)


def test_the_demo_mode_warning_of_the_planted_code_reads_as_a_confined_defect(demo_alerts, tmp_path):
    from warranty_forecast.stages.life_models import fit_lives

    shaped, alerts = demo_alerts
    config = load_config(
        shipments_path=ROOT / "data_demo" / "shipments.parquet", claims_path=ROOT / "data_demo" / "claims.csv",
        out_dir=tmp_path / "out", run_date=dt.date(2026, 12, 2),
    )
    lives = fit_lives(shaped, config.life_model)
    plain = [w for w in lives.warnings if "failure mode START_CAP_SHORT" in w]
    explained = [w for w in lives.warnings_given(alerts.concentrated_codes) if "failure mode START_CAP_SHORT" in w]
    assert len(plain) == len(explained) == 1
    assert plain[0].startswith("product QCP-140, failure mode START_CAP_SHORT: no fit (unidentifiable)")
    assert explained[0].startswith(
        "product QCP-140, failure mode START_CAP_SHORT: no life fit (unidentifiable), as expected of a defect"
        " confined to flagged build months (failure code START_CAP_SHORT: 266 of its 266 returns"
    )
