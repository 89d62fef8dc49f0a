"""Goodness of fit of a life model to monthly warranty returns: observed vs expected by month in service.

Input: a `LifeData` whose returns are all monthly intervals (b_{k-1}, b_k] (integer month in service
k >= 1; no exact failure ages), either all on the day grid of `lifecore.data.month_interval_ends`
(b_k = floor(k L) / L, L = 365.25/12 days: what the pipeline produces) or all on whole months
(b_k = k), and suspensions at any age in months, plus a fitted model given as a callable
log_survival(t) -> log R(t) (e.g. `FitResult.log_survival` of any family).

Risk sets, for month k = 1..K (K: the last month holding a return or the end of an observation):
  n_k  units exposed for the whole month: returned in a month >= k, or suspended at an age >= b_k;
  a suspension at age a in (b_{k-1}, b_k) is exposed for (b_{k-1}, a] only (a "partial" unit of month k);
  d_k  returns in month k.
Expected returns under the model, with conditional probabilities taken in log space:
  e_k = n_k * (1 - R(b_k)/R(b_{k-1})) + sum over partial units of month k of (1 - R(a)/R(b_{k-1})),
  1 - R(b)/R(b_{k-1}) = -expm1(log R(b) - log R(b_{k-1})).
Two statistics:
  * Pearson X^2 = sum (d - e)^2 / e over cells made by pooling adjacent months until each has
    e >= min_expected; df = cells - n_parameters.
  * Deviance G^2 = 2 (log L_saturated - log L_model) against the life-table model with one free
    hazard per month (see `saturated_log_likelihood`); df = months with exposure - n_parameters.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
import pandas as pd
from scipy import special, stats

from warranty_forecast.lifecore.data import LifeData, month_interval_ends

logger = logging.getLogger(__name__)

FloatArray = npt.NDArray[np.float64]
LogSurvival = Callable[[FloatArray], npt.ArrayLike]

CELL_COLUMNS = ("months_in_service", "units_exposed", "observed", "expected", "standardized_residual")
POOLED_COLUMNS = ("first_month", "last_month", "observed", "expected")


# ---------------------------------------------------------------------------------------------
# Risk sets
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _RiskSets:
    """Per month k = 1..K (index k-1) plus the partial (withdrawn mid-month) suspensions (internal)."""

    edges: FloatArray  # b_0 = 0, b_1, ..., b_K: month k is the age interval (b_{k-1}, b_k], in months
    returns: FloatArray  # d_k
    whole: FloatArray  # n_k, units exposed for the whole month (including the d_k returns)
    partial_month: npt.NDArray[np.int64]  # month k holding each partial suspension
    partial_age: FloatArray  # its age a in (b_{k-1}, b_k)
    partial_count: FloatArray
    suspension_ages: FloatArray  # every positive-count suspension with age > 0
    suspension_counts: FloatArray

    @property
    def n_months(self) -> int:
        return len(self.returns)

    @property
    def partial_fraction(self) -> FloatArray:
        """Share of its month each partial suspension was observed: (a - b_{k-1}) / (b_k - b_{k-1})."""
        start, end = self.edges[self.partial_month - 1], self.edges[self.partial_month]
        return (self.partial_age - start) / (end - start)

    def partial_sum(self, values: FloatArray) -> FloatArray:
        """Sum of values over the partial suspensions of each month (length K)."""
        return np.bincount(self.partial_month - 1, weights=values, minlength=self.n_months)


def _month_of_interval(lower: FloatArray, upper: FloatArray) -> tuple[npt.NDArray[np.int64], bool]:
    """Month in service k of each return interval, and whether the intervals are on the day grid
    (`month_interval_ends`) rather than whole months (k-1, k]; one grid for all rows."""
    k = np.round(upper).astype(np.int64)
    if np.all(k >= 1):
        day_lower, day_upper = month_interval_ends(k)
        if np.allclose(lower, day_lower, rtol=0, atol=1e-9) and np.allclose(upper, day_upper, rtol=0, atol=1e-9):
            return k, True
        if np.all(upper == k) and np.all(lower == k - 1.0):
            return k, False
    bad = ~((k >= 1) & (np.isclose(upper, k) | np.isclose(upper, month_interval_ends(np.maximum(k, 1))[1])))
    j = int(np.flatnonzero(bad)[0]) if np.any(bad) else 0
    raise ValueError(
        "returns must be monthly intervals, all on the day grid of month_interval_ends(k) or all (k-1, k],"
        f" with integer k >= 1; got ({lower[j]!r}, {upper[j]!r}]"
    )


def _risk_sets(data: LifeData) -> _RiskSets:
    e = data.exact_counts > 0
    if np.any(e):
        raise ValueError("goodness of fit by month needs monthly returns; exact failure ages are not supported")
    i = data.interval_counts > 0
    upper, lower, counts = data.interval_upper[i], data.interval_lower[i], data.interval_counts[i]
    months, day_grid = _month_of_interval(lower, upper) if len(upper) else (np.zeros(0, dtype=np.int64), True)
    s = (data.suspension_counts > 0) & (data.suspension_ages > 0.0)  # age 0: never exposed
    ages, s_counts = data.suspension_ages[s], data.suspension_counts[s]

    def month_ends(n: int) -> FloatArray:
        k = np.arange(0, n + 1, dtype=float)
        return np.concatenate([[0.0], month_interval_ends(k[1:])[1]]) if day_grid else k

    # the month holding the oldest suspension: the first k with b_k >= a
    oldest = float(ages.max(initial=0.0))
    last_by_age = int(np.ceil(oldest)) + 1
    edges = month_ends(last_by_age)
    last = max(int(months.max(initial=0)), int(np.searchsorted(edges, oldest, side="left")))
    if last == 0:
        raise ValueError("no exposure: no returns and no suspension older than age 0")
    edges = month_ends(last)
    d = np.bincount(months - 1, weights=counts, minlength=last)
    # returns in months >= k
    returns_from_k = np.cumsum(d[::-1])[::-1]
    # suspensions with age >= b_k cover whole months 1..m, m = the number of month ends b_1..b_K <= a
    whole_months = np.searchsorted(edges[1:], ages, side="right").astype(np.int64)
    covered = np.bincount(whole_months, weights=s_counts, minlength=last + 1)[1:]  # by m = 1..last
    suspended_from_k = np.cumsum(covered[::-1])[::-1]
    inside = ages > edges[whole_months]  # not on a month end: partial exposure in month m + 1
    return _RiskSets(
        edges=edges,
        returns=d,
        whole=returns_from_k + suspended_from_k,
        partial_month=whole_months[inside] + 1,
        partial_age=ages[inside],
        partial_count=s_counts[inside],
        suspension_ages=ages,
        suspension_counts=s_counts,
    )


def _log_survival(log_survival: LogSurvival, t: FloatArray) -> FloatArray:
    values = np.asarray(log_survival(np.asarray(t, dtype=float)), dtype=float)
    if values.shape != t.shape:
        raise ValueError(f"log_survival returned shape {values.shape} for ages of shape {t.shape}")
    if np.any(np.isnan(values)) or np.any(values > 1e-12):
        raise ValueError("log_survival must return values <= 0 (log of a survival probability), not NaN")
    return np.minimum(values, 0.0)


def _log1m_ratio(log_r_end: FloatArray, log_r_start: FloatArray) -> FloatArray:
    """log(1 - R(end)/R(start)) (-inf where the ratio is 1); -expm1 keeps small probabilities exact."""
    with np.errstate(divide="ignore", invalid="ignore"):
        diff = np.where(np.isneginf(log_r_start), 0.0, log_r_end - log_r_start)
        return np.log(-np.expm1(diff))


def _conditional_failure(log_r_end: FloatArray, log_r_start: FloatArray) -> FloatArray:
    """1 - R(end)/R(start) = -expm1(log R(end) - log R(start)), 0 where R(start) = 0."""
    with np.errstate(invalid="ignore"):
        diff = np.where(np.isneginf(log_r_start), 0.0, log_r_end - log_r_start)
    if np.any(diff > 1e-12):
        raise ValueError("log_survival must be non-increasing in age")
    return -np.expm1(np.minimum(diff, 0.0))


# ---------------------------------------------------------------------------------------------
# Saturated life-table model
# ---------------------------------------------------------------------------------------------


def _saturated_terms(risk: _RiskSets) -> tuple[FloatArray, FloatArray]:
    """(exposure E_k in months of the units not returned in month k, maximised log-likelihood per month)."""
    exposure = (risk.whole - risk.returns) + risk.partial_sum(risk.partial_count * risk.partial_fraction)
    exposure = np.maximum(exposure, 0.0)  # rounding of fractional counts only
    d = risk.returns
    total = d + exposure
    return exposure, special.xlogy(d, d) + special.xlogy(exposure, exposure) - special.xlogy(total, total)


def saturated_log_likelihood(data: LifeData) -> float:
    """Maximised log-likelihood of the life-table model with one constant hazard per month.

    Model: hazard lambda_k per month-length on month k = (b_{k-1}, b_k] (the risk sets' month ends), so
    a unit alive at b_{k-1} survives a share s (0 <= s <= 1) of the month with probability
    exp(-lambda_k s). Month k's likelihood, conditional on the risk set entering it, collects:
      * d_k returns, interval-censored in month k (only the month is known):  d_k log(1 - e^{-lambda_k});
      * n_k - d_k units surviving the whole month:                           -(n_k - d_k) lambda_k;
      * suspensions withdrawn inside month k at age a:                       -lambda_k s,
        s = (a - b_{k-1}) / (b_k - b_{k-1}).
    So l_k(lambda) = d log(1 - e^{-lambda}) - lambda E, with E = E_k the exposure in month-lengths of
    the units NOT returned in month k (whole-month survivors count 1, withdrawals s); the
    returns contribute no exposure term because their failure time inside the month is unknown.
    The product over months telescopes to each unit's likelihood (a return in month m gives
    prod_{j<m} e^{-lambda_j} (1 - e^{-lambda_m}) = R(b_{m-1}) - R(b_m)), so months maximise separately.
    Setting dl/dlambda = d / (e^lambda - 1) - E = 0 gives lambda_k = log(1 + d_k / E_k), hence
    1 - e^{-lambda} = d / (d + E), e^{-lambda} = E / (d + E), and the maximum
      l_k* = d log d + E log E - (d + E) log(d + E)    (0 log 0 = 0),
    which is 0 when d = 0 (lambda = 0) or E = 0 (lambda = infinity: everyone exposed returned).
    Ages in months; `data` must satisfy the same conditions as `goodness_of_fit`.
    """
    return float(_saturated_terms(_risk_sets(data))[1].sum())


# ---------------------------------------------------------------------------------------------
# Pooling
# ---------------------------------------------------------------------------------------------


def pool_cells(expected: npt.ArrayLike, min_expected: float = 5.0) -> npt.NDArray[np.int64]:
    """Cell number (0, 1, ...) for each month, pooling adjacent months in order.

    A cell is closed as soon as its summed expected count reaches `min_expected`; a short last
    cell is merged into the one before it (if any). So every cell has expected >= min_expected,
    unless the total is below it (then there is a single cell).
    """
    expected = np.asarray(expected, dtype=float)
    labels = np.empty(len(expected), dtype=np.int64)
    cell, running = 0, 0.0
    for k, value in enumerate(expected):
        labels[k] = cell
        running += value
        if running >= min_expected:
            cell, running = cell + 1, 0.0
    if len(expected) and labels[-1] == cell and running < min_expected and cell > 0:
        labels[labels == cell] = cell - 1  # short last cell joins its neighbour
    return labels


# ---------------------------------------------------------------------------------------------
# Result
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class GoodnessOfFit:
    """Observed vs expected returns by month in service, with Pearson and deviance tests.

    cells: one row per month in service 1..K (columns CELL_COLUMNS; units_exposed counts whole-month
    exposure only; standardized_residual (d - e)/sqrt(e), NaN where e = 0).
    pooled_cells: the Pearson cells (columns POOLED_COLUMNS). p-values are NaN when df < 1; `notes`
    then says why (and records other caveats, e.g. a clamped deviance).
    """

    chi_square: float
    chi_square_df: int
    chi_square_p_value: float
    deviance: float
    deviance_df: int
    deviance_p_value: float
    cells: pd.DataFrame
    pooled_cells: pd.DataFrame
    largest_residual_month: int
    min_expected: float
    notes: tuple[str, ...] = ()

    def summary_line(self) -> str:
        """One sentence for a report."""

        def p_text(p: float) -> str:
            return "p not available" if math.isnan(p) else f"p = {p:.3g}"

        row = self.cells.loc[self.cells["months_in_service"] == self.largest_residual_month]
        residual = float(row["standardized_residual"].iloc[0]) if len(row) else float("nan")
        text = (
            f"Observed vs expected returns by month in service: Pearson X^2 = {self.chi_square:.2f} on "
            f"{self.chi_square_df} df ({p_text(self.chi_square_p_value)}), deviance G^2 = {self.deviance:.2f} "
            f"on {self.deviance_df} df ({p_text(self.deviance_p_value)}); largest standardized residual "
            f"{residual:+.2f} in month {self.largest_residual_month}"
        )
        if self.notes:
            text += " (" + "; ".join(self.notes) + ")"
        return text + "."


def goodness_of_fit(
    data: LifeData,
    log_survival: LogSurvival,
    n_parameters: int = 2,
    min_expected: float = 5.0,
) -> GoodnessOfFit:
    """Compare observed and model-expected returns per month in service (ages in months).

    `log_survival(t)` must be vectorised over an array of ages t >= 0 and return log R(t) <= 0,
    non-increasing. `n_parameters` is the number of parameters fitted to these data (2 for the
    Weibull or lognormal).

    Deviance: G^2 = 2 (log L_saturated - log L_model). log L_model is computed here from
    log_survival on the same footing (returns in month k: log(R(b_{k-1}) - R(b_k)); suspensions: log R(a)),
    log L_saturated by `saturated_log_likelihood`. The fitted model is nested in the saturated one
    only when every suspension sits on a whole month: a suspension inside month k is scored by the
    model with log(R(a)/R(b_{k-1})) but by the saturated model with -lambda_k s, which assumes
    a constant hazard inside the month. A slightly negative G^2 can therefore occur; it is clamped at
    0 (and noted). df = months with any exposure - n_parameters.
    """
    if n_parameters < 0:
        raise ValueError(f"n_parameters must be >= 0, got {n_parameters!r}")
    if not min_expected > 0.0:
        raise ValueError(f"min_expected must be > 0, got {min_expected!r}")
    risk = _risk_sets(data)
    n_months = risk.n_months
    month_numbers = np.arange(1, n_months + 1)
    log_r_month = _log_survival(log_survival, risk.edges)  # at the month ends b_0 = 0 .. b_K
    log_r_partial = _log_survival(log_survival, risk.partial_age)
    log_r_start = log_r_month[:-1]  # log R(b_{k-1}), k = 1..K

    # -- expected returns ---------------------------------------------------------------------
    q_whole = _conditional_failure(log_r_month[1:], log_r_start)
    q_partial = _conditional_failure(log_r_partial, log_r_start[risk.partial_month - 1])
    expected = risk.whole * q_whole + risk.partial_sum(risk.partial_count * q_partial)
    observed = risk.returns
    positive = expected > 0.0
    residual = np.full(n_months, np.nan)
    residual[positive] = (observed[positive] - expected[positive]) / np.sqrt(expected[positive])
    notes: list[str] = []

    # -- Pearson chi-square on pooled cells ----------------------------------------------------
    labels = pool_cells(expected, min_expected)
    n_cells = int(labels.max()) + 1
    pooled_d = np.bincount(labels, weights=observed, minlength=n_cells)
    pooled_e = np.bincount(labels, weights=expected, minlength=n_cells)
    pooled = pd.DataFrame(
        {
            "first_month": np.array([month_numbers[labels == c].min() for c in range(n_cells)], dtype=np.int64),
            "last_month": np.array([month_numbers[labels == c].max() for c in range(n_cells)], dtype=np.int64),
            "observed": pooled_d,
            "expected": pooled_e,
        }
    )
    if np.all(pooled_e > 0.0):
        chi_square = float(np.sum((pooled_d - pooled_e) ** 2 / pooled_e))
    else:
        chi_square = math.inf if float(pooled_d.sum()) > 0 else 0.0
        notes.append("no expected returns at all under the model")
    chi_df = n_cells - n_parameters
    chi_p = _chi_square_p_value(
        chi_square, chi_df, notes,
        f"Pearson test not available: {n_cells} cell(s) with expected >= {min_expected:g} "
        f"leave {chi_df} df for {n_parameters} fitted parameters",
    )

    # -- deviance against the saturated life-table model ---------------------------------------
    _, saturated_terms = _saturated_terms(risk)
    log_l_saturated = float(saturated_terms.sum())
    has_returns = observed > 0
    log_p_returns = log_r_start[has_returns] + _log1m_ratio(log_r_month[1:][has_returns], log_r_start[has_returns])
    log_l_model = float(observed[has_returns] @ log_p_returns)
    log_l_model += float(risk.suspension_counts @ _log_survival(log_survival, risk.suspension_ages))
    raw_deviance = 2.0 * (log_l_saturated - log_l_model) if np.isfinite(log_l_model) else math.inf
    deviance = max(raw_deviance, 0.0)
    if raw_deviance < 0.0:
        notes.append(f"deviance {raw_deviance:.2e} clamped at 0 (suspensions inside months)")
    exposed_months = int(np.count_nonzero((risk.whole > 0) | (risk.partial_sum(risk.partial_count) > 0)))
    dev_df = exposed_months - n_parameters
    dev_p = _chi_square_p_value(
        deviance, dev_df, notes,
        f"deviance test not available: {exposed_months} month(s) with exposure leave {dev_df} df "
        f"for {n_parameters} fitted parameters",
    )

    cells = pd.DataFrame(
        {
            "months_in_service": month_numbers.astype(np.int64),
            "units_exposed": risk.whole,
            "observed": observed,
            "expected": expected,
            "standardized_residual": residual,
        }
    )
    finite = np.isfinite(residual)
    largest = int(month_numbers[finite][np.argmax(np.abs(residual[finite]))]) if np.any(finite) else 1
    result = GoodnessOfFit(
        chi_square=chi_square,
        chi_square_df=int(chi_df),
        chi_square_p_value=chi_p,
        deviance=float(deviance),
        deviance_df=int(dev_df),
        deviance_p_value=dev_p,
        cells=cells,
        pooled_cells=pooled,
        largest_residual_month=largest,
        min_expected=float(min_expected),
        notes=tuple(notes),
    )
    logger.debug("%s", result.summary_line())
    return result


def _chi_square_p_value(statistic: float, df: int, notes: list[str], unavailable: str) -> float:
    """Upper-tail chi-square p-value on `df` degrees of freedom; NaN and a note when df < 1."""
    if df < 1:
        notes.append(unavailable)
        return math.nan
    return float(stats.chi2.sf(statistic, df))
