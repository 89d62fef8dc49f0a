"""The interval-coverage simulation tool runs end to end (its coverage figures are a report, run by hand)."""

from __future__ import annotations

import numpy as np

from warranty_forecast.lifecore.data import month_interval_ends
from warranty_forecast.tools.interval_coverage import (
    NEXT_12_MONTHS,
    TO_WARRANTY_END,
    WARRANTY_MONTHS,
    Scenario,
    main,
    realised_returns,
    simulate_product,
)


def test_simulated_product_adds_up():
    scenario = Scenario("check", 1.4, 40.0, 6, 300)
    product = simulate_product(np.random.default_rng(1), scenario)
    suspensions, returns = product.fit_suspensions, product.fit_returns
    # every unit is in one row; a row's suspensions are its units less its returns
    assert suspensions["units"].sum() == 6 * 300 == product.lives.size
    assert returns["returns"].sum() + suspensions["suspensions"].sum() == 6 * 300
    assert returns["returns"].sum() == np.sum(product.lives < product.observed_age)
    assert returns["months_in_service"].between(1, WARRANTY_MONTHS).all()
    assert suspensions["observed_age_months"].max() <= month_interval_ends(WARRANTY_MONTHS)[1]
    realised = realised_returns(product)
    # the survivors' true lives ending inside the warranty; the next 12 months are part of that
    assert 0 < realised[NEXT_12_MONTHS] <= realised[TO_WARRANTY_END]
    assert realised[TO_WARRANTY_END] <= suspensions["suspensions"].sum()


def test_tool_runs_end_to_end(capsys):
    code = main(["--runs", "2", "--draws", "40", "--bootstrap-draws", "4", "--scenarios", "small data", "--seed", "3"])
    assert code == 0
    out = capsys.readouterr().out
    assert "coverage of the 90% interval" in out
    for method in ("normal", "bootstrap", "plug-in"):
        assert f"| {method} " in out
    assert main(["--scenarios", "no such"]) == 2
