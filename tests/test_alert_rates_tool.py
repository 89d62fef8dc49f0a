"""The alert-rate benchmark's own arithmetic (its rates are a report, run by hand: see README)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from warranty_forecast.tools.alert_rates import (
    CHANGE_RATIO,
    Scenario,
    clopper_pearson,
    main,
    neyman_pearson_power,
    simulate_product,
)


@pytest.mark.parametrize("expected", [0.3, 5.2945, 40.0])
def test_the_best_possible_test_has_size_alpha_exactly_and_beats_the_plain_count_test(expected):
    # Neyman-Pearson lemma (common statistical knowledge, no source): the randomised count test has size
    # exactly alpha; its power is at least that of the non-randomised test at the same alpha
    alpha = 0.05
    power = neyman_pearson_power(expected, 2.0, alpha)
    k = 0
    while stats.poisson.sf(k, expected) > alpha:
        k += 1  # P(X > k) <= alpha: reject when X > k (plain test)
    plain = stats.poisson.sf(k, 2.0 * expected)
    assert plain <= power + 1e-12
    # size: recover gamma from the power formula's structure by computing the null rejection chance
    gamma = (alpha - stats.poisson.sf(k, expected)) / stats.poisson.pmf(k, expected)
    assert 0.0 <= gamma <= 1.0
    assert stats.poisson.sf(k, expected) + gamma * stats.poisson.pmf(k, expected) == pytest.approx(alpha, abs=1e-12)
    assert power == pytest.approx(stats.poisson.sf(k, 2 * expected) + gamma * stats.poisson.pmf(k, 2 * expected))


def test_clopper_pearson_matches_its_beta_quantile_definition():
    # Clopper & Pearson (1934): exact interval from beta quantiles; 0 successes gives lower 0
    assert clopper_pearson(0, 40)[0] == 0.0
    assert clopper_pearson(0, 40)[1] == pytest.approx(1 - 0.025 ** (1 / 40), rel=1e-9)  # closed form when x = 0


def test_a_process_change_multiplies_the_hazard_of_the_newest_months():
    # seeded: the changed months' share of returns in their first month rises by about CHANGE_RATIO
    rng = np.random.default_rng(3)
    scenario = Scenario("x", 1.0, 100.0, False, process_change=True)
    returns, suspensions = simulate_product(rng, scenario, 200_000)
    first = returns[returns["months_in_service"] == 1].groupby("build_month")["returns"].sum()
    # hazard 1/100 per month: about 1,990 first-month returns per 200,000 units, 1.5 x that when changed
    assert first.iloc[:12].mean() == pytest.approx(200_000 * -np.expm1(-0.01), rel=0.05)
    assert first.iloc[-12:].mean() == pytest.approx(200_000 * -np.expm1(-0.01 * CHANGE_RATIO), rel=0.05)


def test_the_report_runs_end_to_end(capsys):
    assert main(["--runs", "2", "--units", "2000"]) == 0
    out = capsys.readouterr().out
    assert "best possible" in out and "process change" in out and "by the cusum" in out
