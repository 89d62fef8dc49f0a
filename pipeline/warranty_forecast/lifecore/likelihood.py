"""The grouped, censored log-likelihood of any family, with gradient and Hessian in theta.

    log L = sum_i n_i log(S(a_i) - S(b_i))   interval returns in (a_i, b_i] (a_i may be 0)
          + sum_j m_j log S(c_j)             suspensions (right-censored at c_j)
          + sum_k e_k log f(t_k)             exact failure ages (densities: the value depends on
                                             the time unit)

Each term comes from the family's row terms (log S, log F, log f with their derivatives); the
interval term is taken in log space so that it neither cancels nor underflows:

    naive:   log(F(b) - F(a))  -- loses every digit when both are near 0 or near 1
    stable:  log S(a) + log(-expm1(log S(b) - log S(a)))   when F(b) >= 1/2 (upper tail), else
             log F(b) + log(-expm1(log F(a) - log F(b)))   (lower tail; survives F underflowing)
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
import numpy.typing as npt

from warranty_forecast.lifecore.data import LifeData

if TYPE_CHECKING:
    from warranty_forecast.lifecore.families import Family

FloatArray = npt.NDArray[np.float64]
LogLikelihood = tuple[float, FloatArray, FloatArray]

# Smallest gap kept between the two log-probabilities of an interval: at absurd trial parameters
# both may saturate to the same value, and the term then stays finite (and hugely negative).
_MIN_LOG_GAP = 1e-30


def log_likelihood(family: Family, theta: npt.ArrayLike, data: LifeData, *, derivatives: int = 0):  # type: ignore[no-untyped-def]
    """log L of `data` at theta (the family's unbounded parameters); derivatives=1 also returns the
    gradient, derivatives=2 also the Hessian, both in theta. Outside the family's theta_box: -inf."""
    if derivatives not in (0, 1, 2):
        raise ValueError(f"derivatives must be 0, 1 or 2, got {derivatives!r}")
    theta = np.asarray(theta, dtype=float).reshape(2)
    value, gradient, hessian = _sum_terms(family, theta, data, derivatives)
    if derivatives == 0:
        return value
    if derivatives == 1:
        return value, gradient
    return value, gradient, 0.5 * (hessian + hessian.T)


def _sum_terms(family: Family, theta: FloatArray, data: LifeData, derivatives: int) -> LogLikelihood:
    gradient, hessian = np.zeros(2), np.zeros((2, 2))
    box = family.theta_box
    if box is not None and not (abs(theta[0]) <= box[0] and abs(theta[1]) <= box[1]):
        return -math.inf, gradient, hessian
    rows = data.prepared
    value = 0.0
    with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
        parts = [
            (rows.exact_counts, family.row_terms("density", theta, rows.exact_log_ages, derivatives)),
            (rows.suspension_counts, family.row_terms("survival", theta, rows.suspension_log_ages, derivatives)),
            # (0, b]: log(S(0) - S(b)) = log F(b)
            (rows.left_open_counts, family.row_terms("cdf", theta, rows.left_open_log_upper, derivatives)),
            (rows.interval_counts, _interval_terms(family, theta, rows, derivatives)),
        ]
    for counts, (v, g, h) in parts:
        if not counts.size:
            continue
        value += float(counts @ v)
        if derivatives:
            gradient += counts @ g
        if derivatives == 2:
            hessian += np.einsum("n,nij->ij", counts, h)
    return value, gradient, hessian


def _interval_terms(
    family: Family, theta: FloatArray, rows, derivatives: int  # type: ignore[no-untyped-def]
) -> tuple[FloatArray, FloatArray | None, FloatArray | None]:
    """log(S(a) - S(b)) for closed intervals (a > 0), per row, with derivatives (see module docstring).

    With B the larger log-probability and s the smaller (B = log S(a), s = log S(b) in the upper tail;
    B = log F(b), s = log F(a) in the lower), r = exp(s - B), w = r / (1 - r), D = grad s - grad B:
    value B + log(1 - r), gradient grad B - w D, Hessian H_B - w (H_s - H_B) - w (1 + w) D D'.
    """
    log_a, log_b = rows.interval_log_lower, rows.interval_log_upper
    if not log_a.size:
        return np.zeros(0), np.zeros((0, 2)), np.zeros((0, 2, 2))
    s_a = family.row_terms("survival", theta, log_a, derivatives)
    s_b = family.row_terms("survival", theta, log_b, derivatives)
    f_a = family.row_terms("cdf", theta, log_a, derivatives)
    f_b = family.row_terms("cdf", theta, log_b, derivatives)
    upper_tail = s_b[0] <= -math.log(2.0)  # F(b) >= 1/2

    def pick(i: int) -> tuple[FloatArray | None, FloatArray | None]:
        if s_a[i] is None:
            return None, None
        mask = upper_tail.reshape((-1,) + (1,) * (s_a[i].ndim - 1))
        return np.where(mask, s_a[i], f_b[i]), np.where(mask, s_b[i], f_a[i])

    (big, small), (g_big, g_small), (h_big, h_small) = pick(0), pick(1), pick(2)
    gap = np.minimum(small - big, -_MIN_LOG_GAP)
    value = big + np.log(-np.expm1(gap))
    if not derivatives:
        return value, None, None
    w = 1.0 / np.expm1(-gap)
    difference = g_small - g_big
    gradient = g_big - w[:, None] * difference
    if derivatives < 2:
        return value, gradient, None
    hessian = (
        h_big
        - w[:, None, None] * (h_small - h_big)
        - (w * (1.0 + w))[:, None, None] * difference[:, :, None] * difference[:, None, :]
    )
    return value, gradient, hessian
