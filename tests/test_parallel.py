"""Per-product work in worker processes gives what one process gives, in the same order (issue 11)."""

from __future__ import annotations

import datetime as dt

import pandas as pd
import pytest

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.stages import parallel
from warranty_forecast.stages.reporting_delay import correct_for_reporting_delay


def _square_plus(x, y):
    return x * x + y


def test_results_come_back_in_the_order_given():
    arguments = [(i, 1) for i in range(50)]
    assert parallel.map_products(_square_plus, arguments, workers=2, min_products=2) == [i * i + 1 for i in range(50)]
    assert parallel.map_products(_square_plus, arguments, workers=1) == [i * i + 1 for i in range(50)]


def test_fold_sees_each_result_in_the_order_given_and_its_return_is_kept():
    arguments = [(i, 1) for i in range(50)]
    for workers, least in ((2, 2), (1, None)):
        seen: list[int] = []

        def fold(result: int) -> int:
            seen.append(result)
            return -result

        got = parallel.map_products(_square_plus, arguments, workers=workers, min_products=least, fold=fold)
        assert seen == [i * i + 1 for i in range(50)]
        assert got == [-(i * i + 1) for i in range(50)]


def _sigterm_handler(_):
    import signal

    return signal.getsignal(signal.SIGTERM)


def test_workers_end_on_sigterm_whatever_handler_the_run_installed():
    # common practice, no source: a worker that inherited the run's stopping handler would only fail its
    # item on SIGTERM and go on with the next; the workers restore the default action (end the process)
    import signal

    def stop(number, frame):  # the run's kind of handler: raise to stop
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGTERM, stop)
    try:
        handlers = parallel.map_products(_sigterm_handler, [(i,) for i in range(8)], workers=2, min_products=2)
    finally:
        signal.signal(signal.SIGTERM, previous)
    assert handlers == [signal.SIG_DFL] * 8


def test_worker_count():
    assert parallel.worker_count(3) == 3 and parallel.worker_count(0) >= 1
    with pytest.raises(ValueError, match="workers"):
        parallel.worker_count(-1)


def test_the_delay_correction_in_two_processes_equals_one(monkeypatch):
    # three products of grouped returns and suspensions (invented), each with its own filing delays
    returns, suspensions, delays = [], [], []
    for index, product in enumerate(["A", "B", "C"]):
        for month in range(1, 13):
            returns.append((product, dt.date(2024, 1, 1), dt.date(2024, 1, 1), 24, month, 5 + index + month % 3))
            delays.append((product, month % 9 + 1, 200, 40 + index))
        for age in (3.0, 6.0, 12.0, 18.0):
            suspensions.append((product, dt.date(2024, 1, 1), dt.date(2024, 1, 1), 24, dt.date(2024, 1, 15), age, 500.0))
    fit_returns = pd.DataFrame(returns, columns=["product", "build_month", "sale_month", "warranty_months",
                                                 "months_in_service", "returns"])
    fit_suspensions = pd.DataFrame(suspensions, columns=["product", "build_month", "sale_month", "warranty_months",
                                                         "warranty_start_date", "observed_age_months", "suspensions"])
    claim_delays = pd.DataFrame(delays, columns=["product", "delay_days", "observable_days", "claims"])
    arguments = (fit_returns, fit_suspensions, claim_delays, dt.date(2025, 12, 31), LifeModelSettings(),
                 {"A": 24, "B": 24, "C": 24})
    one = correct_for_reporting_delay(*arguments, min_claims=10, workers=1)
    monkeypatch.setattr(parallel, "MIN_PRODUCTS_FOR_WORKERS", 2)
    two = correct_for_reporting_delay(*arguments, min_claims=10, workers=2)
    pd.testing.assert_frame_equal(one.table, two.table)
    pd.testing.assert_frame_equal(one.fit_returns, two.fit_returns)
    pd.testing.assert_frame_equal(one.fit_suspensions, two.fit_suspensions)


def test_product_fits_in_two_processes_equal_one(monkeypatch):
    import numpy as np

    from warranty_forecast.lifecore.data import LifeData
    from warranty_forecast.stages.fitting import fit_products

    data = {
        product: LifeData.from_monthly_returns(
            months_in_service=np.arange(1, 13, dtype=float), returns=np.full(12, 4.0 + shift),
            suspension_ages=np.array([6.0, 12.0, 24.02]), suspension_counts=np.array([300.0, 300.0, 900.0]),
        )
        for shift, product in enumerate(["A", "B", "C"])
    }
    one = fit_products(data, LifeModelSettings(), {"A": 24, "B": 24, "C": 24}, workers=1)
    monkeypatch.setattr(parallel, "MIN_PRODUCTS_FOR_WORKERS", 2)
    two = fit_products(data, LifeModelSettings(), {"A": 24, "B": 24, "C": 24}, workers=2)
    assert list(one) == list(two) == ["A", "B", "C"]
    for product in one:
        assert one[product].fit.parameters == two[product].fit.parameters
        assert one[product].status == two[product].status and one[product].message == two[product].message
