"""The build-month Poisson CUSUM: the recursion by hand, Lucas's count scale, the designed threshold
against the exact Markov-chain run length (Brook & Evans 1972) and an independent simulation, the
in-control chance of a signal over a finite stretch, detection of a doubled rate, and the guards."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import stats

from warranty_forecast.stages.build_month_cusum import (
    MAX_EXPECTED_RETURNS,
    cusum_path,
    design_threshold,
    in_control_run_length,
    in_control_signal_probability,
    run_chart,
    threshold_for_run_length,
)

LN2 = math.log(2.0)


# -- exact references ----------------------------------------------------------------------------------


def lattice_chain(decision: int, mean: float, k: int) -> np.ndarray:
    """Brook & Evans (1972, Biometrika 59), Markov-chain ARL; exact for integer increments: the count
    chart C_t = max(0, C_{t-1} + O_t - k), O ~ Poisson(mean), signalling at C >= decision, on its
    transient states 0..decision-1. Returns the substochastic transition matrix Q."""
    i = np.arange(decision)[:, None]
    j = np.arange(decision)[None, :]
    return np.where(j == 0, stats.poisson.cdf(k - i, mean), stats.poisson.pmf(j + k - i, mean))


def exact_run_length(decision: int, mean: float, k: int) -> float:
    """ARL from C_0 = 0: the first entry of (I - Q)^-1 1."""
    q = lattice_chain(decision, mean, k)
    return float(np.linalg.solve(np.eye(decision) - q, np.ones(decision))[0])


def exact_signal_probability(decision: int, mean: float, k: int, months: int) -> float:
    """P(signal within `months` months) from C_0 = 0: 1 - e_0' Q^months 1."""
    q = lattice_chain(decision, mean, k)
    return float(1.0 - np.linalg.matrix_power(q, months)[0].sum())


def simulated_run_length(values, shift: float, h: float, runs: int, seed: int) -> tuple[float, float]:
    """Direct simulation, independent of the module's cycle method: `runs` charts from S = 0, months
    drawing E with replacement from `values`, O ~ Poisson(E), run until S > h. Mean and standard error."""
    rng = np.random.default_rng(seed)
    values = np.asarray(values, dtype=float)
    run_length = np.zeros(runs)
    s = np.zeros(runs)
    alive = np.arange(runs)
    month = 0
    while alive.size:
        e = rng.choice(values, size=(alive.size, 256))
        walk = s[alive][:, None] + np.cumsum(rng.poisson(e) * math.log(shift) - (shift - 1.0) * e, axis=1)
        path = walk - np.minimum(np.minimum.accumulate(walk, axis=1), 0.0)  # Lindley: the reflected walk
        over = path > h
        hit = over.any(axis=1)
        run_length[alive[hit]] = month + over.argmax(axis=1)[hit] + 1
        s[alive] = path[:, -1]
        alive = alive[~hit]
        month += 256
    return float(run_length.mean()), float(run_length.std(ddof=1) / math.sqrt(runs))


# -- the recursion -------------------------------------------------------------------------------------


def test_cusum_path_on_a_hand_computed_example():
    observed = [3, 0, 2, 0]
    expected = [1.0, 2.0, 0.5, 0.0]
    # hand computation, r = 2, increment O ln 2 - (2 - 1) E, ln 2 = 0.693147:
    #   month 1: 0 + 3 x 0.693147 - 1.0 = 1.079442                   -> S_1 = 1.079442
    #   month 2: 1.079442 + 0 - 2.0 = -0.920558, floored at 0        -> S_2 = 0
    #   month 3: 0 + 2 x 0.693147 - 0.5 = 0.886294                   -> S_3 = 0.886294
    #   month 4: E = 0 and O = 0 leave S unchanged                   -> S_4 = 0.886294
    path = cusum_path(observed, expected, 2.0)
    np.testing.assert_allclose(path, [3 * LN2 - 1.0, 0.0, 2 * LN2 - 0.5, 2 * LN2 - 0.5], rtol=0, atol=1e-12)
    np.testing.assert_allclose(path, [1.079442, 0.0, 0.886294, 0.886294], atol=5e-7)
    # returns where the baseline expects none (E = 0, O = 2) add O ln r
    assert cusum_path([2], [0.0], 2.0)[0] == pytest.approx(2 * LN2)


def test_with_constant_expected_returns_it_is_lucas_count_chart_scaled_by_ln_r():
    # S / ln r = max(0, C + O - k), k = (r - 1) E / ln r (Lucas 1985 on the count scale)
    rng = np.random.default_rng(11)
    shift, expected = 1.7, 3.2
    k = (shift - 1.0) * expected / math.log(shift)
    observed = rng.poisson(expected * 1.3, size=60)
    count_chart, c = [], 0.0
    for o in observed:
        c = max(0.0, c + o - k)
        count_chart.append(c)
    path = cusum_path(observed, np.full(60, expected), shift)
    np.testing.assert_allclose(path / math.log(shift), count_chart, rtol=1e-12, atol=1e-12)


# -- the threshold against exact and independent references -------------------------------------------------


@pytest.mark.parametrize(
    ("shift", "k", "target"),
    [
        (2.0, 2, 500.0),  # exact lattice ARLs 339.8 (C >= 6), 692.0 (C >= 7)
        (2.0, 2, 2000.0),  # 1398.0 (C >= 8), 2811.6 (C >= 9)
        (3.0, 1, 700.0),  # 374.8 (C >= 5), 1147.8 (C >= 6)
    ],
)
def test_threshold_reaches_the_exact_markov_chain_run_length_on_a_lattice(shift, k, target):
    # constant E with an integer k = (r - 1) E / ln r: C = S / ln r is an integer-valued Markov chain
    # (Brook & Evans 1972, Markov-chain ARL; exact for integer increments). The chart signals at
    # S > h, i.e. C >= floor(h / ln r) + 1; ARL jumps between lattice values, so the design must return
    # the first lattice threshold whose ARL reaches the target (targets here are >= 25% from a jump).
    expected = k * math.log(shift) / (shift - 1.0)
    design = design_threshold([expected], shift, target, seed=3)
    c = design.threshold / math.log(shift)
    decision = math.floor(c) + 1
    assert c - math.floor(c) == pytest.approx(0.5, abs=1e-9)  # mid-gap: rounding cannot move a month
    exact = exact_run_length(decision, expected, k)
    assert exact >= target > exact_run_length(decision - 1, expected, k)
    # the design's own estimate agrees with the exact chain within 4 Monte Carlo standard errors (< 3%)
    assert design.run_length_standard_error < 0.03 * design.run_length
    assert abs(design.run_length - exact) < 4 * design.run_length_standard_error


def test_threshold_run_length_is_confirmed_by_an_independent_simulation():
    # a product whose months differ (and two months with E = 0): no lattice, the target is met closely
    values = [0.0, 0.0, 0.6, 1.1, 1.9, 2.7, 3.4, 5.2, 6.8, 9.5, 14.0, 21.0, 37.0]
    target = 200.0
    design = design_threshold(values, 2.0, target, seed=5)
    assert design.run_length == pytest.approx(target, rel=0.05)
    mean, standard_error = simulated_run_length(values, 2.0, design.threshold, runs=4000, seed=99)
    combined = math.hypot(standard_error, design.run_length_standard_error)
    assert abs(mean - design.run_length) < 4 * combined
    # the same estimator at the fixed h with another seed (no search, so no selection)
    again = in_control_run_length(values, 2.0, design.threshold, seed=6)
    assert abs(again.mean - mean) < 4 * math.hypot(again.standard_error, standard_error)


def test_in_control_signal_probability_matches_the_exact_chain_over_36_months():
    shift, k = 2.0, 2
    expected = k * LN2  # lattice: the exact chance of absorption within 36 months is known
    h = 6.5 * LN2  # signal at C >= 7
    exact = exact_signal_probability(7, expected, k, 36)
    chance = in_control_signal_probability(np.full(36, expected), shift, h, seed=8, runs=40000)
    assert abs(chance - exact) < 4 * math.sqrt(exact * (1 - exact) / 40000)
    assert in_control_signal_probability([], shift, h, seed=8) == 0.0
    assert in_control_signal_probability([0.0, 0.0], shift, 0.0, seed=8) == 0.0  # S never moves


# -- properties ------------------------------------------------------------------------------------------


VALUES = [0.4, 0.9, 1.6, 2.5, 3.8, 5.5, 7.9, 11.0, 16.0, 24.0]


def test_larger_in_control_run_length_gives_larger_threshold():
    thresholds = [threshold_for_run_length(VALUES, 2.0, arl, seed=1) for arl in (50, 150, 500, 1500, 5000)]
    assert all(a < b for a, b in zip(thresholds, thresholds[1:]))


def test_design_is_deterministic_for_a_seed():
    first = design_threshold(VALUES, 2.5, 800, seed=42)
    assert design_threshold(VALUES, 2.5, 800, seed=42) == first
    assert threshold_for_run_length(VALUES, 2.5, 800, seed=42) == first.threshold
    assert first.target_run_length == 800 and first.shift == 2.5 and first.seed == 42
    a = in_control_signal_probability(VALUES, 2.5, first.threshold, seed=3)
    assert in_control_signal_probability(VALUES, 2.5, first.threshold, seed=3) == a


def test_a_doubled_rate_signals_quickly():
    # a product with no defect for 12 months, then every month at twice its expected returns
    rng = np.random.default_rng(21)
    expected = np.linspace(2.0, 20.0, 30)
    h = threshold_for_run_length(expected, 2.0, 1000, seed=2)
    delays, false_alarms = [], 0
    for _ in range(300):
        observed = rng.poisson(expected)
        observed[12:] = rng.poisson(2.0 * expected[12:])
        above = np.flatnonzero(cusum_path(observed, expected, 2.0) > h)
        false_alarms += bool(above.size and above[0] < 12)
        later = above[above >= 12]
        delays.append(later[0] - 12 + 1 if later.size else math.inf)  # months from the shift to the signal
    delays = np.array(delays)
    assert np.median(delays) <= 3  # against 1000 months in control
    assert np.mean(delays <= 6) >= 0.95
    assert false_alarms <= 15  # 12 months at ARL0 = 1000: about 1% expected, 5% allowed


def test_run_chart_on_one_product_with_a_bad_lot():
    rng = np.random.default_rng(4)
    expected = np.linspace(25.0, 0.5, 36)  # old build months have had longer in service
    observed = rng.poisson(expected)
    observed[10:13] = rng.poisson(3.0 * expected[10:13])  # a bad lot built in months 10-12
    result = run_chart(observed, expected, 2.0, 1000, seed=9)
    assert result.first_signal is not None and 10 <= result.first_signal <= 12
    assert result.signal_months[0] == result.first_signal
    assert all(result.path[i] > result.threshold for i in result.signal_months)
    assert np.count_nonzero(result.path > result.threshold) == len(result.signal_months)
    np.testing.assert_array_equal(result.path, cusum_path(observed, expected, 2.0))
    assert not result.path.flags.writeable
    assert result.threshold == result.design.threshold and result.in_control_run_length == 1000
    assert result.shift == 2.0 and result.design.target_run_length == 1000
    assert 0.0 < result.in_control_signal_probability < 0.15  # 36 months at ARL0 = 1000
    quiet = run_chart(rng.poisson(expected), expected, 2.0, 1000, seed=9)
    assert quiet.threshold == result.threshold  # the design depends on E and the seed only
    assert quiet.first_signal is None or quiet.first_signal not in range(10, 13)


# -- guards --------------------------------------------------------------------------------------------


def test_empty_input():
    assert cusum_path([], [], 2.0).size == 0
    with pytest.raises(ValueError, match="expected_per_month is empty"):
        design_threshold([], 2.0, 100, seed=1)
    with pytest.raises(ValueError, match="expected is empty"):
        run_chart([], [], 2.0, 100, seed=1)


def test_all_expected_zero():
    np.testing.assert_array_equal(cusum_path([0, 0], [0.0, 0.0], 2.0), [0.0, 0.0])
    with pytest.raises(ValueError, match="expected_per_month has no month with expected returns > 0"):
        threshold_for_run_length([0.0, 0.0], 2.0, 100, seed=1)
    with pytest.raises(ValueError, match="expected has no month"):
        run_chart([0, 0], [0.0, 0.0], 2.0, 100, seed=1)
    assert in_control_run_length([0.0], 2.0, 1.0, seed=1).mean == math.inf


@pytest.mark.parametrize(
    ("call", "name"),
    [
        (lambda: cusum_path([1, math.nan], [1.0, 1.0], 2.0), "observed"),
        (lambda: cusum_path([1, 2], [1.0, math.nan], 2.0), "expected"),
        (lambda: design_threshold([1.0, math.nan], 2.0, 100, seed=1), "expected_per_month"),
        (lambda: in_control_signal_probability([math.nan], 2.0, 1.0, seed=1), "expected"),
        (lambda: in_control_signal_probability([1.0], 2.0, math.nan, seed=1), "h"),
        (lambda: design_threshold([1.0], 2.0, math.nan, seed=1), "in_control_run_length"),
        (lambda: cusum_path([1, 2], [1.0, -1.0], 2.0), "expected"),
        (lambda: cusum_path([1.5], [1.0], 2.0), "observed"),
        (lambda: cusum_path([1, 2], [1.0], 2.0), "observed and expected"),
        (lambda: design_threshold([1.0], 2.0, 100, seed=None), "seed"),
    ],
)
def test_bad_values_are_rejected_naming_the_argument(call, name):
    with pytest.raises(ValueError, match=name):
        call()


@pytest.mark.parametrize("shift", [1.0, 0.5, -2.0, math.nan, math.inf])
def test_shift_must_exceed_one(shift):
    with pytest.raises(ValueError, match="shift"):
        cusum_path([1], [1.0], shift)
    with pytest.raises(ValueError, match="shift"):
        design_threshold([1.0], shift, 100, seed=1)


@pytest.mark.parametrize("arl", [0.0, 0.5, -10.0, math.inf])
def test_in_control_run_length_below_one_is_rejected(arl):
    with pytest.raises(ValueError, match="in_control_run_length"):
        threshold_for_run_length([1.0], 2.0, arl, seed=1)


def test_huge_expected_counts_do_not_overflow():
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no overflow or invalid-value warnings either
        path = cusum_path([2e12, 0], [1e12, 1e12], 2.0)
        assert path[0] == pytest.approx(2e12 * LN2 - 1e12) and path[1] == 0.0
        # in control such a month never moves S up: any h >= 0 has an (astronomically) long run length
        alone = design_threshold([1e12], 2.0, 1000, seed=1)
        assert alone.threshold == 0.0 and alone.run_length == math.inf
        mixed = design_threshold([1e12, 2.0, 5.0], 2.0, 1000, seed=1)
        assert 0.0 < mixed.threshold < math.log(1000) + LN2 and math.isfinite(mixed.run_length)
        assert 0.0 <= in_control_signal_probability([1e12, 2.0] * 10, 2.0, mixed.threshold, seed=1) < 0.1
    with pytest.raises(ValueError, match="expected_per_month"):
        design_threshold([MAX_EXPECTED_RETURNS * 10], 2.0, 1000, seed=1)


# Lucas (1985) tabulates ARLs of the Poisson CUSUM; no value from those tables is used here because
# none is remembered with certainty. The exact Markov-chain values above stand in for them.
