"""One-dimensional maximisation by damped Newton (fixed-parameter fits, profile likelihoods)."""

from __future__ import annotations

import logging
import math
from collections.abc import Callable
from typing import NamedTuple

from scipy import optimize

logger = logging.getLogger(__name__)

# A 1-D maximum is accepted once the Newton decrement d1^2 / -d2 (twice the log-likelihood still
# to gain) is below this; the profile value is then exact to ~1e-11 log-likelihood units.
_DECREMENT_TOL = 1e-10
_MAX_NEWTON_STEPS = 60


class Max1D(NamedTuple):
    """Result of `maximise_1d` (internal): the maximiser, fun's tuple there, and how it ended."""

    x: float
    values: tuple[float, ...]
    iterations: int
    converged: bool
    at_bound: bool


def maximise_1d(
    fun: Callable[[float], tuple[float, ...]],
    x0: float,
    lower: float,
    upper: float,
    *,
    max_step: float = 2.0,
) -> Max1D:
    """Maximise fun(x)[0] over lower <= x <= upper, where fun returns (value, d1, d2, ...).

    Damped Newton from x0 (steps capped at max_step, halved until the value does not fall); a
    maximum on a bound with the slope pointing out of the range is accepted (at_bound). If Newton
    fails (non-finite values, no ascent, no convergence) a bounded scalar search is the fallback.
    """
    x = min(max(x0, lower), upper)
    current = fun(x)
    for iteration in range(_MAX_NEWTON_STEPS):
        value, d1, d2 = current[:3]
        if not (math.isfinite(value) and math.isfinite(d1) and math.isfinite(d2)):
            break
        if d2 < 0.0:
            step = -d1 / d2
            if d1 * step < _DECREMENT_TOL:
                return Max1D(x, current, iteration, True, False)
        elif d1 != 0.0:
            step = math.copysign(max_step, d1)  # not locally concave: move uphill
        else:
            break
        step = min(max(step, -max_step), max_step)
        x_new = min(max(x + step, lower), upper)
        if x_new == x:  # on a bound and pushed outwards (or a step below the spacing of floats)
            return Max1D(x, current, iteration, True, x in (lower, upper))
        floor = value - 1e-12 * (1.0 + abs(value))  # rounding of the summed log-likelihood
        for _ in range(50):
            candidate = fun(x_new)
            if math.isfinite(candidate[0]) and candidate[0] >= floor:
                break
            x_new = x + 0.5 * (x_new - x)
        else:
            break
        x, current = x_new, candidate
    # fallback: bounded Brent search on the values alone, then check the slope at its answer
    logger.debug("1-D Newton failed from %.6g in [%.6g, %.6g]; bounded search", x0, lower, upper)

    def negative(v: float) -> float:
        value = fun(v)[0]
        return -value if math.isfinite(value) else math.inf

    found = optimize.minimize_scalar(
        negative, bounds=(lower, upper), method="bounded", options={"xatol": 1e-12 * (1.0 + abs(x0)), "maxiter": 500}
    )
    x = float(found.x)
    current = fun(x)
    value, d1, d2 = current[:3]
    at_bound = min(x - lower, upper - x) < 1e-6 * (upper - lower)
    ok = bool(found.success) and math.isfinite(value) and (at_bound or (d2 < 0.0 and d1 * d1 / -d2 < 1e-6))
    return Max1D(x, current, _MAX_NEWTON_STEPS + int(found.nfev), ok, at_bound)
