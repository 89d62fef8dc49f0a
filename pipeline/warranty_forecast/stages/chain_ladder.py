"""Chain ladder with Mack's standard error: a distribution-free baseline for the returns forecast.

A cumulative triangle has one row per origin (here a build month) and one column per development period
1..n (here the calendar months since the build month, 1 = the build month itself); C[i, j] is the amount
(returns) of origin i up to and including period j. Origin i is observed in periods 1..k_i and unknown
(NaN) after; k_i does not grow from older to younger origins (a staircase: the newest calendar period is
a diagonal). Older origins may be observed to the last column (a trapezoid), which the formulas allow.

Method (Mack 1993, "Distribution-free calculation of the standard error of chain ladder reserve
estimates", ASTIN Bulletin 23), with A_j the origins observed in period j + 1 (j = 1..n-1):

    f_j       = sum_{A_j} C[i, j+1] / sum_{A_j} C[i, j]                     volume-weighted factor
    sigma2_j  = 1/(|A_j| - 1) sum_{A_j} C[i, j] (C[i, j+1]/C[i, j] - f_j)^2   (|A_j| >= 2)
    sigma2_j  = min(sigma2_{j-1}^2 / sigma2_{j-2}, sigma2_{j-2}, sigma2_{j-1})  (|A_j| = 1: Mack's rule
                for the last period, applied in turn where more than one period lacks two origins)
    C^[i, j+1] = C^[i, j] f_j  beyond k_i;  ultimate U_i = C^[i, n];  reserve R_i = U_i - C[i, k_i]

and the mean squared error of C^[i, m] (the ultimate when m = n; Mack's derivation is the same for any
target period m, the sums stop at m - 1):

    mse_i  = C^[i, m]^2 sum_{j=k_i}^{m-1} sigma2_j / f_j^2 (1 / C^[i, j] + 1 / S_j),  S_j = sum_{A_j} C[i, j]
    mse    = sum_i mse_i + sum_{i<l} 2 C^[i, m_i] C^[l, m_l] sum_{j=max(k_i, k_l)}^{min(m_i, m_l)-1} sigma2_j / (f_j^2 S_j)

(the second sum is the covariance through the shared factors, Mack 1993's formula for the total). The
standard error is the square root. Amounts are in the triangle's units (returns, or currency units);
standard errors in the same units.

Edges: a column whose sum over A_j is zero gets the factor 1 (a note says so); a cell with C[i, j] <= 0
cannot enter sigma2_j's ratio and is left out of it (and of its degrees of freedom), with a note;
decreasing cumulative amounts (negative increments) are allowed; a single origin or a single period gives
zero reserve where nothing is unobserved. Rows that are not a staircase of observed cells raise
ValueError naming the origin and period.

Pure numpy and pandas; no I/O. `returns_triangle` builds the triangle from counted returns by build month
and development month; `next_periods_forecast` gives the next calendar periods' increments (diagonals).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np
import pandas as pd

SUMMARY_COLUMNS = ("latest_period", "latest", "ultimate", "reserve", "standard_error", "coefficient_of_variation")


@dataclass(frozen=True)
class ChainLadderResult:
    """A fitted chain ladder (see the module docstring for the formulas).

    Index of the per-origin Series: the origins, sorted. Index of `factors`, `sigma2` and
    `sigma2_extrapolated`: the development period j = 1..n-1 the factor leads from (to j + 1).
    Amounts and standard errors are in the triangle's units.
    """

    cumulative: pd.DataFrame  # the input, origins sorted, columns 1..n, NaN where unobserved
    latest_period: pd.Series  # k_i, the last observed period of each origin
    factors: pd.Series  # f_j
    sigma2: pd.Series  # Mack's sigma^2_j
    sigma2_extrapolated: pd.Series  # True where sigma^2_j was extrapolated (fewer than two usable origins)
    column_sums: pd.Series  # S_j = sum over A_j of C[i, j], the denominators of the factors
    projected: pd.DataFrame  # observed cells kept, the others C^[i, j] = C^[i, j-1] f_{j-1}
    latest: pd.Series  # C[i, k_i]
    ultimate: pd.Series  # C^[i, n]
    reserve: pd.Series  # ultimate - latest
    standard_error: pd.Series  # Mack's standard error of the reserve (of the ultimate) per origin
    total_reserve: float
    total_standard_error: float  # with the covariance across origins
    notes: tuple[str, ...]  # the edges met (zero columns, cells left out of sigma^2, extrapolations)

    @property
    def periods(self) -> int:
        """n, the number of development periods."""
        return int(self.cumulative.shape[1])

    def summary(self) -> pd.DataFrame:
        """One row per origin (SUMMARY_COLUMNS) and a last row 'total'; coefficient_of_variation =
        standard_error / reserve (NaN where the reserve is 0)."""
        table = pd.DataFrame({
            "latest_period": self.latest_period.astype(float),
            "latest": self.latest,
            "ultimate": self.ultimate,
            "reserve": self.reserve,
            "standard_error": self.standard_error,
        })
        table.loc["total"] = [np.nan, self.latest.sum(), self.ultimate.sum(), self.total_reserve, self.total_standard_error]
        reserve = table["reserve"].to_numpy(dtype=float)
        table["coefficient_of_variation"] = np.divide(
            table["standard_error"].to_numpy(dtype=float), reserve, out=np.full(len(table), np.nan), where=reserve != 0
        )
        return table[list(SUMMARY_COLUMNS)]


@dataclass(frozen=True)
class NextPeriodsForecast:
    """The chain ladder's forecast of the increments in the next `periods` calendar periods (diagonals).

    `by_origin`: per origin, the last observed period, the target period m_i = min(k_i + periods, n)
    (no development is projected past the last column, i.e. a tail factor of 1), the latest amount, the
    forecast C^[i, m_i] - C[i, k_i] and its Mack standard error. `by_origin_and_period`: the increments,
    origins x 1..periods (column t: the t-th calendar period after the latest diagonal). `by_period`: their
    column sums. Units: the triangle's.
    """

    periods: int
    by_origin: pd.DataFrame
    by_origin_and_period: pd.DataFrame
    by_period: pd.Series
    total: float
    total_standard_error: float  # with the covariance across origins


# -------------------------------------------------------------------------------------------- checking


def _checked_triangle(cumulative: pd.DataFrame) -> tuple[pd.DataFrame, np.ndarray]:
    """The triangle with origins sorted and float values, and k_i; ValueError naming what is wrong."""
    if not isinstance(cumulative, pd.DataFrame):
        raise ValueError(f"cumulative must be a pandas DataFrame, not {type(cumulative).__name__}")
    if cumulative.shape[0] == 0 or cumulative.shape[1] == 0:
        raise ValueError(f"cumulative must have at least one origin and one development period, got shape {cumulative.shape}")
    columns = list(cumulative.columns)
    if columns != list(range(1, len(columns) + 1)):
        raise ValueError(
            f"cumulative's columns must be the development periods 1..n in order, got {columns[:6]}"
            f"{' ...' if len(columns) > 6 else ''}"
        )
    if cumulative.index.has_duplicates:
        duplicated = cumulative.index[cumulative.index.duplicated()].unique()
        raise ValueError(f"cumulative has a repeated origin: {list(duplicated)[:3]}")
    try:
        triangle = cumulative.sort_index().astype(float)
    except (TypeError, ValueError) as error:
        raise ValueError(f"cumulative must hold numbers (NaN where unobserved): {error}") from None
    values = triangle.to_numpy()
    infinite = np.isinf(values)
    if infinite.any():
        i, j = np.argwhere(infinite)[0]
        raise ValueError(f"cumulative is infinite at origin {triangle.index[i]!r}, development period {j + 1}")
    observed = ~np.isnan(values)
    latest = observed.sum(axis=1)
    for i, origin in enumerate(triangle.index):
        if latest[i] == 0:
            raise ValueError(f"origin {origin!r} has no observed development period (a row of NaN)")
        gap = np.flatnonzero(~observed[i, : latest[i]])
        if gap.size:
            raise ValueError(
                f"origin {origin!r} is not observed in development period {gap[0] + 1} but is in a later one:"
                " each origin must be observed in periods 1..k with nothing after (not a triangle)"
            )
    younger_longer = np.flatnonzero(np.diff(latest) > 0)
    if younger_longer.size:
        i = younger_longer[0] + 1
        raise ValueError(
            f"origin {triangle.index[i]!r} is observed to development period {latest[i]}, past the older origin"
            f" {triangle.index[i - 1]!r} (to period {latest[i - 1]}): the observed cells must form a staircase"
            " whose newest diagonal is one calendar period (not a triangle)"
        )
    if latest[0] < triangle.shape[1]:
        raise ValueError(
            f"development period {latest[0] + 1} is observed for no origin (the oldest, {triangle.index[0]!r},"
            f" stops at {latest[0]}): drop the columns after it"
        )
    return triangle, latest.astype(np.int64)


# --------------------------------------------------------------------------------------------- fitting


def chain_ladder(cumulative: pd.DataFrame) -> ChainLadderResult:
    """Fit the chain ladder with Mack's standard errors to a cumulative triangle.

    `cumulative`: rows = origins (any sortable labels, sorted here), columns = development periods 1..n
    (integers, in order), cumulative amounts, NaN in the unobserved lower right. See the module docstring
    for the formulas (Mack 1993) and the edges.
    """
    triangle, latest_period = _checked_triangle(cumulative)
    values = triangle.to_numpy()
    origins_count, periods = values.shape
    notes: list[str] = []
    negative = np.diff(values, axis=1) < 0
    if negative.any():
        notes.append(f"{int(negative.sum())} negative increment(s) (decreasing cumulative amounts): allowed")

    factors = np.ones(periods - 1)
    sigma2 = np.full(periods - 1, np.nan)
    extrapolated = np.zeros(periods - 1, dtype=bool)
    column_sums = np.zeros(periods - 1)
    for j in range(periods - 1):  # the factor from period j + 1 to j + 2 (0-based column j to j + 1)
        rows = latest_period >= j + 2
        now, then = values[rows, j], values[rows, j + 1]
        column_sums[j] = now.sum()
        if column_sums[j] == 0:
            notes.append(
                f"development period {j + 1}: the origins observed in period {j + 2} sum to 0 in period {j + 1};"
                f" factor set to 1 (their period-{j + 2} amounts, {then.sum():g}, are not projected)"
            )
            factors[j] = 1.0
        else:
            factors[j] = then.sum() / column_sums[j]
        positive = now > 0
        if (~positive).any() and column_sums[j] != 0:
            notes.append(
                f"development period {j + 1}: {int((~positive).sum())} origin(s) with an amount <= 0 left out of"
                " sigma^2 (no ratio)"
            )
        if positive.sum() >= 2:
            # sum C (C'/C - f)^2 = sum (C' - f C)^2 / C, without forming the ratio
            sigma2[j] = np.sum((then[positive] - factors[j] * now[positive]) ** 2 / now[positive]) / (positive.sum() - 1)
    for j in range(periods - 1):
        if np.isnan(sigma2[j]):
            sigma2[j] = _extrapolated_sigma2(sigma2[:j])
            extrapolated[j] = True
            if np.isnan(sigma2[j]):
                notes.append(
                    f"development period {j + 1}: sigma^2 cannot be estimated (fewer than two origins with an"
                    " amount above 0 here, and no earlier estimate): standard errors of projections through it are NaN"
                )
            else:
                notes.append(
                    f"development period {j + 1}: sigma^2 extrapolated (fewer than two origins with an amount above 0),"
                    " Mack 1993: "
                    f"min(s2[j-1]^2/s2[j-2], s2[j-2], s2[j-1]) = {sigma2[j]:.6g}"
                )

    projected = values.copy()
    for j in range(periods - 1):
        unknown = np.isnan(projected[:, j + 1])
        projected[unknown, j + 1] = projected[unknown, j] * factors[j]
    latest = values[np.arange(origins_count), latest_period - 1]
    ultimate = projected[:, -1]
    reserve = ultimate - latest
    target = np.full(origins_count, periods, dtype=np.int64)
    per_origin_mse, total_mse = _mack_mse(projected, latest_period, target, factors, sigma2, column_sums)

    index = triangle.index
    period_index = pd.Index(range(1, periods), name="development_period")
    return ChainLadderResult(
        cumulative=triangle,
        latest_period=pd.Series(latest_period, index=index, name="latest_period"),
        factors=pd.Series(factors, index=period_index, name="factor"),
        sigma2=pd.Series(sigma2, index=period_index, name="sigma2"),
        sigma2_extrapolated=pd.Series(extrapolated, index=period_index, name="sigma2_extrapolated"),
        column_sums=pd.Series(column_sums, index=period_index, name="column_sum"),
        projected=pd.DataFrame(projected, index=index, columns=triangle.columns),
        latest=pd.Series(latest, index=index, name="latest"),
        ultimate=pd.Series(ultimate, index=index, name="ultimate"),
        reserve=pd.Series(reserve, index=index, name="reserve"),
        standard_error=pd.Series(np.sqrt(per_origin_mse), index=index, name="standard_error"),
        total_reserve=float(reserve.sum()),
        total_standard_error=float(np.sqrt(total_mse)),
        notes=tuple(notes),
    )


def _extrapolated_sigma2(earlier: np.ndarray) -> float:
    """Mack's (1993) rule for a period with fewer than two origins: min(s_{-1}^4 / s_{-2}^2, s_{-2}^2, s_{-1}^2)
    from the two periods before it; with one earlier period, its value; with none, NaN."""
    known = earlier[~np.isnan(earlier)]
    if known.size == 0:
        return float("nan")
    if known.size == 1:
        return float(known[-1])
    last, before = float(known[-1]), float(known[-2])
    candidates = [before, last]
    if before > 0:
        candidates.append(last * last / before)
    return float(min(candidates))


def _mack_mse(
    projected: np.ndarray,
    latest_period: np.ndarray,
    target_period: np.ndarray,
    factors: np.ndarray,
    sigma2: np.ndarray,
    column_sums: np.ndarray,
) -> tuple[np.ndarray, float]:
    """Mack's mean squared error of C^[i, m_i] per origin and of the sum over origins (with the
    covariance through the shared factors), for target periods m_i >= k_i (1-based)."""
    origins_count, periods = projected.shape
    # w_j = sigma2_j / f_j^2 (0 where f_j = 0: every projection through it is 0 as well)
    weight = np.divide(sigma2, factors**2, out=np.zeros_like(sigma2), where=factors != 0)
    parameter = np.divide(weight, column_sums, out=np.zeros_like(weight), where=column_sums != 0)
    target_amount = projected[np.arange(origins_count), target_period - 1]
    per_origin = np.zeros(origins_count)
    for i in range(origins_count):
        steps = np.arange(latest_period[i] - 1, target_period[i] - 1)  # 0-based j = k_i .. m_i - 1
        if steps.size == 0 or target_amount[i] == 0:
            continue  # nothing projected, or a projection of 0 (from a latest amount of 0): no error
        amount = projected[i, steps]
        # C^[i,m]^2 / C^[i,j]: 0 where C^[i,j] = 0 (the whole projection is then 0)
        process = np.divide(target_amount[i] ** 2, amount, out=np.zeros_like(amount), where=amount != 0)
        per_origin[i] = np.sum(weight[steps] * process + parameter[steps] * target_amount[i] ** 2)
    covariance = 0.0
    for j in range(periods - 1):
        # origins projected through step j -> j + 1: k_i <= j + 1 (1-based) and m_i >= j + 2
        rows = (latest_period <= j + 1) & (target_period >= j + 2) & (target_amount != 0)
        if rows.sum() >= 2:
            amounts = target_amount[rows]
            covariance += parameter[j] * (amounts.sum() ** 2 - np.sum(amounts**2))
    return per_origin, float(per_origin.sum() + covariance)


# ---------------------------------------------------------------------------------- next periods


def next_periods_forecast(result: ChainLadderResult, periods: int = 12) -> NextPeriodsForecast:
    """The chain ladder's forecast of the increments in the next `periods` calendar periods (the next
    diagonals): per origin C^[i, m_i] - C[i, k_i] with m_i = min(k_i + periods, n), and in total, each with
    Mack's standard error for that target period (the module docstring's mse with m = m_i; at m_i = n it is
    the reserve's). No development is projected past the last column n (a tail factor of 1)."""
    if isinstance(periods, bool) or not isinstance(periods, (int, np.integer)) or periods < 1:
        raise ValueError(f"periods must be an integer >= 1, got {periods!r}")
    n = result.periods
    projected = result.projected.to_numpy()
    latest_period = result.latest_period.to_numpy(dtype=np.int64)
    target = np.minimum(latest_period + int(periods), n)
    per_origin_mse, total_mse = _mack_mse(
        projected, latest_period, target, result.factors.to_numpy(), result.sigma2.to_numpy(),
        result.column_sums.to_numpy(),
    )
    rows = np.arange(len(latest_period))
    latest = projected[rows, latest_period - 1]
    steps = np.zeros((len(latest_period), int(periods)))
    for t in range(1, int(periods) + 1):
        now = np.minimum(latest_period + t, n)
        before = np.minimum(latest_period + t - 1, n)
        steps[:, t - 1] = projected[rows, now - 1] - projected[rows, before - 1]
    forecast = projected[rows, target - 1] - latest
    index = result.cumulative.index
    by_origin = pd.DataFrame({
        "latest_period": latest_period,
        "target_period": target,
        "latest": latest,
        "forecast": forecast,
        "standard_error": np.sqrt(per_origin_mse),
    }, index=index)
    by_origin_and_period = pd.DataFrame(steps, index=index, columns=pd.Index(range(1, int(periods) + 1), name="period"))
    return NextPeriodsForecast(
        periods=int(periods),
        by_origin=by_origin,
        by_origin_and_period=by_origin_and_period,
        by_period=by_origin_and_period.sum(axis=0).rename("forecast"),
        total=float(forecast.sum()),
        total_standard_error=float(np.sqrt(total_mse)),
    )


# ------------------------------------------------------------------------------------------- triangles


def month_number(value: object) -> int:
    """Months since year 0 of a date's month (year * 12 + month - 1); accepts date, datetime, Timestamp."""
    stamp = pd.Timestamp(value)
    return int(stamp.year) * 12 + int(stamp.month) - 1


def last_whole_month(as_of: dt.date) -> int:
    """The month number (`month_number`) of the newest calendar month wholly elapsed at the end of
    `as_of`: as_of's own month when as_of is its last day, else the month before."""
    following = as_of + dt.timedelta(days=1)
    return month_number(as_of) if following.month != as_of.month else month_number(as_of) - 1


def development_month(build_month: object, failure_month: object) -> int:
    """Development month of a return: 1 + the calendar months from its build month to its failure's month
    (1 = failed in the build month itself)."""
    return month_number(failure_month) - month_number(build_month) + 1


def returns_triangle(
    counts: pd.DataFrame,
    as_of: dt.date,
    *,
    origins: object = None,
    origin_column: str = "build_month",
    development_column: str = "development_month",
    value_column: str = "returns",
) -> pd.DataFrame:
    """The cumulative triangle of returns known at `as_of`, for `chain_ladder`.

    `counts`: a long table of counted returns, one row per origin (build month, a date in the month) x
    development month (1 + calendar months from the build month to the failure's month, see
    `development_month`) with the count in `value_column`; repeated cells are added up. It should hold
    the returns known at `as_of` (claims filed by then); rows for cells not yet wholly elapsed are dropped.

    Only whole calendar months enter: cell (o, d) lies in calendar month o + d - 1 and is observed when
    that month has wholly elapsed at the end of `as_of` (`last_whole_month`): at a month-end as-of its own
    month counts; otherwise the incomplete current month is left out, so that every diagonal is one whole
    month and the factors compare like with like. Returns that fell in the left-out part of a month are
    in neither the triangle nor (for the backtest) its latest diagonal.

    `origins`: the build months to include (default: those in `counts`); a build month without returns is
    a row of zeros. Build months whose first month has not wholly elapsed are left out (nothing observed).
    Columns: development months 1..n, n = months from the oldest origin to the last whole month.
    Index: origins as `datetime.date` (first of the month), sorted. ValueError for a development month
    below 1, a cell after as_of's month, or a count that is not finite.
    """
    for column in (origin_column, development_column, value_column):
        if column not in counts.columns:
            raise ValueError(f"counts has no column {column!r} (columns: {list(counts.columns)})")
    last = last_whole_month(as_of)
    origin_numbers = np.array([month_number(v) for v in counts[origin_column]], dtype=np.int64)
    development = counts[development_column].to_numpy()
    value = counts[value_column].to_numpy(dtype=float)
    if len(counts):
        if not np.all(np.isfinite(value)):
            raise ValueError(f"counts[{value_column!r}] must be finite numbers")
        if np.any(development < 1) or np.any(development != np.round(development)):
            bad = counts.loc[(development < 1) | (development != np.round(development)), development_column].iloc[0]
            raise ValueError(f"counts[{development_column!r}] must be whole months >= 1 (1 = the build month), got {bad!r}")
        calendar = origin_numbers + development.astype(np.int64) - 1
        if np.any(calendar > month_number(as_of)):
            i = int(np.argmax(calendar > month_number(as_of)))
            raise ValueError(
                f"counts holds returns of origin {counts[origin_column].iloc[i]!r} in development month"
                f" {development[i]}, after the as-of month of {as_of}: not known then"
            )
    else:
        calendar = np.zeros(0, dtype=np.int64)
    wanted = sorted(set(origin_numbers.tolist()) if origins is None else {month_number(o) for o in origins})
    wanted = [o for o in wanted if o <= last]
    if not wanted:
        raise ValueError(f"no origin has a whole calendar month elapsed by {as_of}: the triangle would be empty")
    periods = last - wanted[0] + 1
    increments = np.zeros((len(wanted), periods))
    position = {o: i for i, o in enumerate(wanted)}
    keep = calendar <= last
    for o, d, v in zip(origin_numbers[keep], development.astype(np.int64)[keep], value[keep]):
        row = position.get(int(o))
        if row is not None:
            increments[row, int(d) - 1] += v
    cumulative = np.cumsum(increments, axis=1)
    observed_to = np.array([last - o + 1 for o in wanted])
    cumulative[np.arange(periods)[None, :] >= observed_to[:, None]] = np.nan
    index = pd.Index([dt.date(o // 12, o % 12 + 1, 1) for o in wanted], name=origin_column)
    return pd.DataFrame(cumulative, index=index, columns=pd.Index(range(1, periods + 1), name=development_column))
