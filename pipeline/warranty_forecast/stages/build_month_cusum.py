"""A one-sided upper Poisson CUSUM over a product's build months, in production order, and its threshold
set by simulation to an in-control average run length.

Units: counts are returns, time is build months. For one product, month t (t = 1, 2, ..., production
order) has observed returns O_t and expected returns E_t under the product's baseline life model (see
`build_month_alerts`: E_t grows with the month's units and with how long they have been in service, so
it differs from month to month). The chart is

    S_0 = 0,    S_t = max(0, S_{t-1} + O_t ln(r) - (r - 1) E_t),

and it signals at the first month with S_t > h. The increment O ln r - (r - 1) E is the log-likelihood
ratio of Poisson(r E) against Poisson(E), so this is Page's CUSUM (Page 1954, Biometrika 41, from
memory) tuned to a rate of returns that has moved from E_t to r E_t (`shift` r > 1; r = 2 is "twice the
expected returns"). S and h are on the log-likelihood-ratio scale (natural log): nats, not returns.
A month with E_t = 0 and O_t = 0 leaves S unchanged; a month with E_t = 0 and O_t > 0 (returns where
the baseline expects none) adds O_t ln r.

With E_t = E constant this is the Poisson CUSUM of Lucas (1985, "Counted data CUSUM's", Technometrics
27(2), from memory) on another scale: dividing by ln r,

    C_t = S_t / ln r = max(0, C_{t-1} + O_t - k),    k = (r - 1) E / ln r,

Lucas's chart with reference value k (returns per month) and decision interval h / ln r (returns).
With E_t varying, the likelihood-ratio form above keeps the meaning of r in every month; a count-scale
chart with one k would not.

What the threshold means. h is set so that the in-control average run length ARL0, the mean number of
build months until a signal when O_t ~ Poisson(E_t) (the baseline is right, no defect), equals a target.
With ARL0 = 1000, a product with no defect signals on average once every 1000 build months; over 36
build months the chance of a false signal is then of the order of 36 / 1000. For example, with E_t
falling evenly from 30 (the oldest build month) to 0.5 (the newest) over 36 months, r = 2 and
ARL0 = 1000 (h = 4.53, seed 1), the chance of a signal somewhere in those 36 months is 4.2% (+-0.1%;
40,000 simulated products), against 1 - (1 - 1/1000)^36 = 3.5% for a constant hazard: the order of the
months matters. `in_control_signal_probability` gives that chance for any sequence of E_t, and
`run_chart` reports it for the product's own months.

The run length depends on the E_t a product has. The design takes the product's own E_t values and
assumes that future months draw their expected counts independently, with replacement, from them (a
resample, not a cyclic repeat: the order of future months' sizes and ages is not known, and the
resample makes S a Markov chain, which the method needs).

How h is found (`design_threshold`; `threshold_for_run_length` returns its h):

1. Cycles. From S = 0 the chart runs until it resets to 0 or passes h; the resets are renewals, so
   (Page 1954, from memory; Wald's identity)

       ARL0(h) = N(h) / p(h),   N(h) = E0[months of a cycle, stopped at a signal],
                                p(h) = P0(a cycle passes h before it resets),

   E0 and P0 in control. A cycle whose first month does not move S up has one month and no signal; its
   probability 1 - q0 is computed exactly, and only cycles that start upward are simulated (their first
   month from its exact conditional law).
2. p(h) is small (about N / ARL0), so it is estimated by importance sampling: cycles are simulated in
   control and, as many, with the shifted rate r E_t, where they climb (Siegmund 1976, Annals of
   Statistics 4, from memory, for the shifted-rate idea). The increments are the log-likelihood ratio,
   so a cycle that first passes h at S = s has likelihood ratio (shifted : in control) (q0 / q1) e^s,
   q1 the shifted chance of an upward first month, and both samples are pooled with the weight
   1 / (1/2 + 1/2 (q0 / q1) e^s) (a defensive mixture, Hesterberg 1995, Technometrics 37, from memory):
   the shifted cycles carry the many-month climbs of small E, the in-control ones the single jumps of
   large E, where shifted cycles overshoot h far. N(h) comes from the in-control cycles alone.
3. Common random numbers. The cycles do not depend on h, only where they are read does: each records
   its running-maximum steps, so N(h) and p(h) are step functions known for every h at once, and the
   estimate of ARL0(h) is non-decreasing in h. h is the smallest level at which it reaches the target,
   placed in the middle of the gap before the next simulated value of S, so that rounding noise in S
   cannot move a month across the threshold. On a lattice (e.g. constant E with an integer k, where S is
   a multiple of ln r) ARL0(h) jumps by about a factor r per step of ln r, and the achieved ARL0 is the
   first lattice value at or above the target.
4. Bounds. A cycle passes h with in-control chance at most e^-h (its shifted-measure weight at the
   passage is below e^-h) and N >= 1, so ARL0(h) >= e^h and h <= ln ARL0 (the bound of Lorden 1971,
   Ann. Math. Statist. 42, from memory; the argument is the one just given); the pooled estimate obeys
   ARL0(h) >= e^h / 2, so its h is below ln ARL0 + ln 2. A pilot with a tenth of the cycles places h,
   and the main cycles are followed only to ln r + 1 above it (to ln ARL0 + ln r + 1 if that proves too
   low). Months with E = 0 do not move S: they are left out of the resample and the run length is
   divided by the share of months with E > 0 (Wald's identity).

Accuracy and speed (measured on this module, 2 cores, default 10,000 cycles of each kind):
`ThresholdDesign.run_length_standard_error` is the delta-method Monte Carlo standard error of the
estimate of ARL0 at the returned h, 1-3% of ARL0 for E from 0.5 to 200, r from 1.5 to 3 and ARL0 from
100 to 2000 (up to 4.5% for a mixture of a few tiny and many large E at r = 3). Over 20 seeds and
three patterns of E, the true ARL0 at the returned h (re-measured with 200,000 cycles by
`in_control_run_length`) scattered around the target with a standard deviation of about 1.2 times that
standard error. On lattice cases (constant E with integer k, r = 2 and 3) the estimate agrees with the
exact Markov-chain ARL (Brook & Evans 1972, Biometrika 59, from memory) within its standard error
(z over 64 designs: sd 0.99, largest 2.2). A design takes 0.03-0.2 s; the cost grows with
1 / (mean E x (r ln r - r + 1)), the months a shifted cycle needs to climb, so for mean E below about
0.05 at r = 2, or r close to 1, it takes longer (E = 0.01: about 1 s).

numpy and scipy only; every random draw comes from numpy's default generator seeded by the caller.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from scipy import special, stats

DEFAULT_RUNS = 10000  # cycles of each kind (shifted and in control) for the threshold design
DEFAULT_SIGNAL_RUNS = 20000  # simulated products for in_control_signal_probability
MAX_EXPECTED_RETURNS = 1e15  # per build month; larger is a unit error upstream, not a product
_MAX_BLOCK = 256  # months simulated per cycle per step of the cycle loop (the block doubles up to this)
_RELATIVE_TIE = 1e-9  # values of S closer than this (relative, floor 1) are the same value (rounding noise)


@dataclass(frozen=True)
class ThresholdDesign:
    """A threshold h on the log-likelihood-ratio scale (nats) and the in-control average run length
    (build months) estimated at it. h is the smallest level whose estimate reaches the target, so
    `run_length` is at or just above `target_run_length` (well above on a lattice, where ARL0 jumps);
    the true ARL0 at h differs from it by Monte Carlo error of about `run_length_standard_error`."""

    threshold: float
    target_run_length: float
    run_length: float
    run_length_standard_error: float
    shift: float
    runs: int
    seed: int


class RunLength(NamedTuple):
    """An estimated average run length (build months) and its Monte Carlo standard error."""

    mean: float
    standard_error: float


@dataclass(frozen=True, eq=False)
class BuildMonthCusum:
    """The chart run on one product's build months (indices are positions in the input order).

    `path` holds S_t (read-only); `signal_months` the months with S_t > threshold; `first_signal` the
    first of them (None when the chart never signals); `in_control_signal_probability` the chance that
    these months' expected counts alone (no defect) give a signal somewhere (Monte Carlo)."""

    path: np.ndarray
    threshold: float
    first_signal: int | None
    signal_months: tuple[int, ...]
    in_control_run_length: float
    shift: float
    design: ThresholdDesign
    in_control_signal_probability: float


# -- the chart ---------------------------------------------------------------------------------------


def cusum_path(observed, expected, shift: float) -> np.ndarray:
    """S_t = max(0, S_{t-1} + O_t ln r - (r - 1) E_t), S_0 = 0, for each month in the order given."""
    r = _check_shift(shift)
    o = _check_counts(observed, "observed")
    e = _check_expected(expected, "expected")
    if o.shape != e.shape:
        raise ValueError(f"observed and expected differ in length ({o.size} and {e.size} build months)")
    increments = o * math.log(r) - (r - 1.0) * e
    path = np.empty_like(increments)
    s = 0.0
    for t, x in enumerate(increments):
        s = max(0.0, s + x)
        path[t] = s
    return path


def run_chart(
    observed, expected, shift: float, in_control_run_length: float, *, seed: int, runs: int = DEFAULT_RUNS,
) -> BuildMonthCusum:
    """Run the chart on one product: the threshold designed from the product's own E_t (with `seed` and
    `runs` cycles of each kind), the path, the months above it, and the in-control chance of a signal
    over these months (DEFAULT_SIGNAL_RUNS products, a stream derived from `seed`). Empty input and all
    E = 0 are ValueErrors (nothing to design a threshold from)."""
    path = cusum_path(observed, expected, shift)
    seed = _check_seed(seed)
    e = np.asarray(expected, dtype=float)
    if e.size == 0:
        raise ValueError("expected is empty: no build months to chart")
    if not np.any(e > 0):
        raise ValueError("expected has no month with expected returns > 0: no threshold can be designed")
    design = design_threshold(e, shift, in_control_run_length, seed=seed, runs=runs)
    chance_seed = int(np.random.SeedSequence([seed, 1]).generate_state(1)[0])
    above = np.flatnonzero(path > design.threshold)
    chance = in_control_signal_probability(e, shift, design.threshold, seed=chance_seed)
    path.setflags(write=False)
    return BuildMonthCusum(
        path=path,
        threshold=design.threshold,
        first_signal=int(above[0]) if above.size else None,
        signal_months=tuple(int(i) for i in above),
        in_control_run_length=float(in_control_run_length),
        shift=float(shift),
        design=design,
        in_control_signal_probability=chance,
    )


# -- the threshold -----------------------------------------------------------------------------------


def threshold_for_run_length(
    expected_per_month, shift: float, in_control_run_length: float, *, seed: int, runs: int = DEFAULT_RUNS,
) -> float:
    """h such that the in-control ARL (build months) is `in_control_run_length` when future months draw
    their expected returns with replacement from `expected_per_month`; see `design_threshold`."""
    return design_threshold(expected_per_month, shift, in_control_run_length, seed=seed, runs=runs).threshold


def design_threshold(
    expected_per_month, shift: float, in_control_run_length: float, *, seed: int, runs: int = DEFAULT_RUNS,
) -> ThresholdDesign:
    """The threshold and its measured in-control ARL (method in the module docstring). Deterministic
    for a given seed; `runs` cycles are simulated in control and as many with the shifted rate."""
    r = _check_shift(shift)
    e = _check_expected(expected_per_month, "expected_per_month")
    target = _check_run_length(in_control_run_length)
    runs = _check_runs(runs, minimum=100)
    seed = _check_seed(seed)
    if e.size == 0:
        raise ValueError("expected_per_month is empty: no build months to design the threshold from")
    positive = e[e > 0]
    if positive.size == 0:
        raise ValueError("expected_per_month has no month with expected returns > 0: the chart never moves")
    moving_share = positive.size / e.size  # months with E = 0 leave S unchanged: they only stretch time
    rng = np.random.default_rng(seed)
    log_r = math.log(r)
    ceiling = math.log(target) + log_r + 1.0  # h <= ln ARL0 (module docstring, point 4)
    tie = _RELATIVE_TIE * max(1.0, ceiling)

    values, counts = np.unique(positive, return_counts=True)
    share = counts / counts.sum()
    laws = (_first_step_law(values, share, 1.0, r, tie), _first_step_law(values, share, r, r, tie))
    if laws[0].probability == 0.0:  # no month can move S up in control (astronomical E only)
        return ThresholdDesign(0.0, target, math.inf, 0.0, r, runs, seed)

    def solve(cycles: int, top: float) -> tuple[float, float, float] | None:
        return _solve(values, share, laws, r, target, moving_share, top, tie, cycles, rng)

    # a pilot with a tenth of the cycles places h; the cycles are then followed only a margin above it
    pilot = solve(max(100, runs // 10), ceiling)
    found = solve(runs, min(ceiling, pilot[0] + log_r + 1.0)) if pilot is not None else None
    if found is None:  # the margin was too small (never seen in testing): follow cycles to the bound
        found = solve(runs, ceiling)
    h, run_length, standard_error = found
    return ThresholdDesign(h, target, run_length, standard_error, r, runs, seed)


def _solve(
    values: np.ndarray, share: np.ndarray, laws: tuple[_FirstStep, _FirstStep], r: float, target: float,
    moving_share: float, ceiling: float, tie: float, runs: int, rng: np.random.Generator,
) -> tuple[float, float, float] | None:
    """Simulate `runs` cycles of each kind up to `ceiling`; the smallest h below the ceiling whose
    estimated ARL0 reaches the target, that ARL0 and its standard error (None if no such h)."""
    in_control = _cycles(laws[0], values, share, 1.0, r, ceiling, tie, runs, rng)
    shifted = _cycles(laws[1], values, share, r, r, ceiling, tie, runs, rng)
    q0, q1 = laws[0].probability, laws[1].probability

    # the step functions N(h) and p(h) on the gaps between distinct simulated values of S
    levels, lows = _distinct_levels(np.concatenate(([0.0], in_control.value, shifted.value)), tie)
    gap_count = levels.size
    steps = np.zeros(gap_count + 1)  # N(h) per gap, through a difference array
    np.add.at(steps, _gap_of(in_control.previous, levels), in_control.time)
    np.add.at(steps, _gap_of(in_control.value, levels), -in_control.time)
    last = _last_record(in_control)
    np.add.at(steps, _gap_of(in_control.value[last], levels), in_control.length[in_control.cycle[last]])
    weight = np.zeros(gap_count + 1)  # p(h) per gap, both samples pooled (module docstring, point 2)
    for sample in (in_control, shifted):
        w = _passage_weight(sample.value, q0, q1)
        np.add.at(weight, _gap_of(sample.previous, levels), w)
        np.add.at(weight, _gap_of(sample.value, levels), -w)
    mean_steps = (1.0 - q0) + q0 * np.cumsum(steps)[:gap_count] / runs
    passage = q0 * np.cumsum(weight)[:gap_count] / (2 * runs)
    with np.errstate(divide="ignore"):
        arl = np.where(passage > 0, mean_steps / np.where(passage > 0, passage, 1.0), np.inf) / moving_share

    # below the ceiling every cycle that could pass h was followed far enough, so the estimate is right
    reached = np.flatnonzero((arl >= target) & (levels < ceiling))
    if reached.size == 0:
        return None
    gap = int(reached[0])
    upper = min(lows[gap + 1], ceiling) if gap + 1 < gap_count else ceiling
    h = 0.5 * (levels[gap] + upper)
    run_length, standard_error = _run_length_at(h, in_control, shifted, q0, q1, runs, moving_share)
    return float(h), run_length, standard_error


def in_control_run_length(
    expected_per_month, shift: float, h: float, *, seed: int, runs: int = DEFAULT_RUNS,
) -> RunLength:
    """The in-control ARL (build months) at a given threshold h, months drawing their expected returns
    with replacement from `expected_per_month`: the estimator of `design_threshold` at a fixed h (no
    search, so no selection), with its Monte Carlo standard error."""
    r = _check_shift(shift)
    e = _check_expected(expected_per_month, "expected_per_month")
    h = _check_threshold(h)
    runs = _check_runs(runs, minimum=100)
    seed = _check_seed(seed)
    if e.size == 0:
        raise ValueError("expected_per_month is empty: no build months to simulate")
    positive = e[e > 0]
    if positive.size == 0:
        return RunLength(math.inf, 0.0)  # S never moves
    tie = _RELATIVE_TIE * max(1.0, h)
    values, counts = np.unique(positive, return_counts=True)
    share = counts / counts.sum()
    laws = (_first_step_law(values, share, 1.0, r, tie), _first_step_law(values, share, r, r, tie))
    if laws[0].probability == 0.0:
        return RunLength(math.inf, 0.0)
    rng = np.random.default_rng(seed)
    in_control = _cycles(laws[0], values, share, 1.0, r, h, tie, runs, rng)
    shifted = _cycles(laws[1], values, share, r, r, h, tie, runs, rng)
    run_length, standard_error = _run_length_at(
        h, in_control, shifted, laws[0].probability, laws[1].probability, runs, positive.size / e.size,
    )
    return RunLength(run_length, standard_error)


def in_control_signal_probability(
    expected, shift: float, h: float, *, seed: int, runs: int = DEFAULT_SIGNAL_RUNS,
) -> float:
    """The chance of a signal in any month of this finite sequence of expected returns when O_t ~
    Poisson(E_t) (no defect): the chance that a night's run flags a product whose baseline is right.
    Monte Carlo with `runs` simulated products; its standard error is sqrt(p (1 - p) / runs)."""
    r = _check_shift(shift)
    e = _check_expected(expected, "expected")
    h = _check_threshold(h)
    runs = _check_runs(runs, minimum=1)
    seed = _check_seed(seed)
    if e.size == 0 or not np.any(e > 0):
        return 0.0  # S never moves
    rng = np.random.default_rng(seed)
    log_r = math.log(r)
    s = np.zeros(runs)
    signalled = np.zeros(runs, dtype=bool)
    for month_expected in e:  # all simulated products side by side, one build month at a time
        s = np.maximum(0.0, s + rng.poisson(month_expected, size=runs) * log_r - (r - 1.0) * month_expected)
        signalled |= s > h
    return float(np.count_nonzero(signalled)) / runs


# -- the simulation ----------------------------------------------------------------------------------


@dataclass(frozen=True)
class _FirstStep:
    """The law of a cycle's first step given that it moves S up: P(up) and, per value of E, the
    conditional weight and the smallest count that moves S up."""

    probability: float
    mix: np.ndarray  # P(E = value | first step up)
    smallest_up: np.ndarray  # smallest O with O ln r - (r - 1) E > tie
    tail: np.ndarray  # P(O >= smallest_up) under the rate of this measure


@dataclass(frozen=True)
class _Cycles:
    """Simulated cycles that start with an upward step, as their running-maximum steps (records):
    record i belongs to `cycle[i]`, reaches S = `value[i]` at month `time[i]` of the cycle, the previous
    record (0 for the first) was `previous[i]`; `length[c]` is cycle c's months until it reset or passed
    the simulation ceiling. Records are sorted by cycle, then time."""

    cycle: np.ndarray
    value: np.ndarray
    previous: np.ndarray
    time: np.ndarray
    length: np.ndarray


def _first_step_law(values: np.ndarray, share: np.ndarray, rate: float, r: float, tie: float) -> _FirstStep:
    log_r = math.log(r)
    drop = (r - 1.0) * values
    # the smallest count k with k ln r - drop > tie, exactly as the simulation rounds it
    k = np.floor((drop + tie) / log_r) + 1.0
    for _ in range(2):
        k = np.where((k >= 2.0) & ((k - 1.0) * log_r - drop > tie), k - 1.0, k)
    for _ in range(2):
        k = np.where(k * log_r - drop <= tie, k + 1.0, k)
    tail = stats.poisson.sf(k - 1.0, rate * values)
    joint = share * tail
    probability = float(joint.sum())
    mix = joint / probability if probability > 0 else joint
    return _FirstStep(probability, mix, k.astype(np.int64), tail)


def _tail_poisson(
    mean: np.ndarray, smallest: np.ndarray, tail: np.ndarray, rng: np.random.Generator,
) -> np.ndarray:
    """Draws of O ~ Poisson(mean) given O >= smallest (exact). Where that is likely, plain rejection;
    in the far tail, a geometric proposal k + J with ratio mean / (k + 1), accepted with probability
    prod_{i=1..J} (k + 1) / (k + i) (the Poisson terms fall at least that fast above k)."""
    out = np.empty(mean.size, dtype=np.int64)
    plain = tail >= 0.05
    index = np.flatnonzero(plain)
    while index.size:
        draw = rng.poisson(mean[index])
        ok = draw >= smallest[index]
        out[index[ok]] = draw[ok]
        index = index[~ok]
    index = np.flatnonzero(~plain)
    while index.size:
        k = smallest[index].astype(float)
        ratio = mean[index] / (k + 1.0)
        j = rng.geometric(1.0 - ratio) - 1  # numpy's geometric counts trials, from 1
        log_accept = j * np.log(k + 1.0) - (special.gammaln(k + j + 1.0) - special.gammaln(k + 1.0))
        ok = np.log(rng.random(index.size)) < log_accept
        out[index[ok]] = (k[ok] + j[ok]).astype(np.int64)
        index = index[~ok]
    return out


def _cycles(
    first: _FirstStep, values: np.ndarray, share: np.ndarray, rate: float, r: float, h_max: float,
    tie: float, runs: int, rng: np.random.Generator,
) -> _Cycles:
    log_r = math.log(r)
    pick = rng.choice(values.size, size=runs, p=first.mix)
    count = _tail_poisson(rate * values[pick], first.smallest_up[pick], first.tail[pick], rng)
    s1 = count * log_r - (r - 1.0) * values[pick]

    cycles, records, times = [np.arange(runs)], [s1], [np.ones(runs, dtype=np.int64)]
    length = np.ones(runs, dtype=np.int64)
    going = s1 <= h_max
    ids, s, top = np.flatnonzero(going), s1[going], s1[going]
    month, block = 1, 4
    while ids.size:
        e = values[rng.choice(values.size, size=(ids.size, block), p=share)]
        walk = s[:, None] + np.cumsum(rng.poisson(rate * e) * log_r - (r - 1.0) * e, axis=1)
        ended = (walk <= tie) | (walk > h_max)
        done = ended.any(axis=1)
        end = np.where(done, ended.argmax(axis=1), block)
        running = np.maximum.accumulate(np.concatenate((top[:, None], walk), axis=1), axis=1)
        new_record = (walk > running[:, :-1]) & (np.arange(block)[None, :] <= end[:, None])
        row, col = np.nonzero(new_record)
        cycles.append(ids[row])
        records.append(walk[row, col])
        times.append(month + col + 1)
        length[ids[done]] = month + end[done] + 1
        keep = ~done
        ids, s, top = ids[keep], walk[keep, -1], running[keep, -1]
        month += block
        block = min(2 * block, _MAX_BLOCK)

    cycle = np.concatenate(cycles)
    value = np.concatenate(records)
    time = np.concatenate(times)
    order = np.lexsort((time, cycle))
    cycle, value, time = cycle[order], value[order], time[order]
    previous = np.zeros_like(value)
    same = cycle[1:] == cycle[:-1]
    previous[1:][same] = value[:-1][same]
    return _Cycles(cycle, value, previous, time, length)


def _passage_weight(value: np.ndarray, q0: float, q1: float) -> np.ndarray:
    """dP0 / d(half P0 + half P1) for a cycle that started upward and first passed h at S = value:
    1 / (1/2 + 1/2 (q0 / q1) exp(value)), computed on the log scale (no overflow for huge S)."""
    half = math.log(0.5)
    return np.exp(-np.logaddexp(half, half + math.log(q0) - math.log(q1) + value))


def _last_record(c: _Cycles) -> np.ndarray:
    """Index of each cycle's last record (every cycle has at least its first step)."""
    return np.flatnonzero(np.append(c.cycle[1:] != c.cycle[:-1], True))


def _distinct_levels(x: np.ndarray, tie: float) -> tuple[np.ndarray, np.ndarray]:
    """The distinct values of x, sorted, a value within `tie` of the previous one merged into its group:
    each group's largest and smallest value. Gap g is h in [largest of group g, smallest of group g + 1)."""
    x = np.sort(x)
    cut = np.diff(x) > tie
    return x[np.append(cut, True)], x[np.insert(cut, 0, True)]


def _gap_of(x: np.ndarray, levels: np.ndarray) -> np.ndarray:
    """Index of the group holding each x: h in gap g is at or above x exactly when g >= that index."""
    return np.searchsorted(levels, x, side="left")


def _run_length_at(
    h: float, in_control: _Cycles, shifted: _Cycles, q0: float, q1: float, runs: int, moving_share: float,
) -> tuple[float, float]:
    """The estimated ARL0 at h and its delta-method Monte Carlo standard error."""
    steps = in_control.length.astype(float)  # a cycle that never passes h counts its full length
    above = in_control.value > h
    first = np.unique(in_control.cycle[above], return_index=True)
    steps[first[0]] = in_control.time[above][first[1]]
    contributions = []
    for sample in (in_control, shifted):
        w = np.zeros(runs)
        above = sample.value > h
        first = np.unique(sample.cycle[above], return_index=True)
        w[first[0]] = _passage_weight(sample.value[above][first[1]], q0, q1)
        contributions.append(w)
    mean_steps = (1.0 - q0) + q0 * steps.mean()
    mean_weight = 0.5 * (contributions[0].mean() + contributions[1].mean())
    passage = q0 * mean_weight
    if passage <= 0:
        return math.inf, math.inf
    arl = mean_steps / passage / moving_share
    weight_variance = 0.25 * (contributions[0].var(ddof=1) + contributions[1].var(ddof=1)) / runs
    steps_variance = q0**2 * steps.var(ddof=1) / runs
    relative = math.sqrt(steps_variance / mean_steps**2 + weight_variance / mean_weight**2)
    return float(arl), float(arl * relative)


# -- argument checks ---------------------------------------------------------------------------------


def _check_shift(shift) -> float:
    try:
        r = float(shift)
    except (TypeError, ValueError):
        raise ValueError(f"shift must be a number > 1, got {shift!r}") from None
    if not math.isfinite(r) or r <= 1.0:
        raise ValueError(f"shift must be a finite number > 1 (the rate multiple to detect), got {shift!r}")
    return r


def _as_vector(x, name: str) -> np.ndarray:
    try:
        a = np.asarray(x, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be numbers") from None
    if a.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional (one value per build month), got shape {a.shape}")
    for bad, what in ((np.isnan(a), "NaN"), (np.isinf(a), "an infinite value"), (a < 0, "a negative value")):
        if bad.any():
            raise ValueError(f"{name} contains {what} (month {int(np.flatnonzero(bad)[0])})")
    return a


def _check_expected(x, name: str) -> np.ndarray:
    a = _as_vector(x, name)
    too_big = a > MAX_EXPECTED_RETURNS
    if too_big.any():
        raise ValueError(
            f"{name} has {a[too_big][0]:g} expected returns in month {int(np.flatnonzero(too_big)[0])}, "
            f"above {MAX_EXPECTED_RETURNS:g}: not a build month (numpy's Poisson sampler stops near 1e18)"
        )
    return a


def _check_counts(x, name: str) -> np.ndarray:
    a = _as_vector(x, name)
    fractional = a != np.floor(a)
    if fractional.any():
        raise ValueError(f"{name} must be whole counts of returns (month {int(np.flatnonzero(fractional)[0])})")
    return a


def _check_run_length(x) -> float:
    try:
        a = float(x)
    except (TypeError, ValueError):
        raise ValueError(f"in_control_run_length must be a number >= 1, got {x!r}") from None
    if not math.isfinite(a) or a < 1.0:
        raise ValueError(f"in_control_run_length must be a finite number of build months >= 1, got {x!r}")
    return a


def _check_threshold(x) -> float:
    try:
        a = float(x)
    except (TypeError, ValueError):
        raise ValueError(f"h must be a number >= 0, got {x!r}") from None
    if not math.isfinite(a) or a < 0:
        raise ValueError(f"h must be a finite number >= 0 (S is never negative), got {x!r}")
    return a


def _check_seed(x) -> int:
    if isinstance(x, bool) or not isinstance(x, (int, np.integer)) or x < 0:
        raise ValueError(f"seed must be a whole number >= 0 (the runs are seeded), got {x!r}")
    return int(x)


def _check_runs(x, minimum: int) -> int:
    if isinstance(x, bool) or not isinstance(x, (int, np.integer)) or x < minimum:
        raise ValueError(f"runs must be a whole number >= {minimum}, got {x!r}")
    return int(x)
