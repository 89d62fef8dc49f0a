"""Pointing a flagged build month at its failure codes: hand-built alert and returns tables with the
observed / expected worked out by hand (common practice, no source), the concentrated-code sentence and
the failure-mode warning that uses it. The demo's causes are tested beside its alerts in
tests/test_build_month_alerts.py."""

from __future__ import annotations

import datetime as dt
import math

import pandas as pd
import pytest
from scipy import stats

from warranty_forecast.stages.build_month_alerts import (
    BUILD_MONTH_CAUSE_COLUMNS,
    cause_table,
    concentrated_codes,
)
from warranty_forecast.stages.failure_modes import ModeFit, mode_warnings

JAN, FEB, MAR, APR = (dt.date(2024, m, 1) for m in (1, 2, 3, 4))


def alerts(flagged: dict[dt.date, float]) -> pd.DataFrame:
    """An alert table of product P's four months: the flagged ones with their whole-window expected returns."""
    return pd.DataFrame({
        "product": "P",
        "build_month": [JAN, FEB, MAR, APR],
        "window_expected_returns": [flagged.get(m, 25.0) for m in (JAN, FEB, MAR, APR)],
        "is_flagged": [m in flagged for m in (JAN, FEB, MAR, APR)],
    })


def returns(rows: list[tuple[dt.date, str, int]], product: str = "P") -> pd.DataFrame:
    return pd.DataFrame(
        [(product, month, code, count) for month, code, count in rows],
        columns=["product", "build_month", "failure_code", "returns"],
    )


# the unflagged months hold 60 SEAL and 40 FAN returns: shares 0.6 and 0.4
BASELINE_ROWS = [(JAN, "SEAL", 20), (JAN, "FAN", 15), (FEB, "SEAL", 20), (FEB, "FAN", 10), (APR, "SEAL", 20),
                 (APR, "FAN", 15)]


def test_a_flagged_months_excess_that_is_all_one_code_puts_that_code_on_top():
    # March is flagged with 10 expected returns: SEAL expects 10 x 0.6 = 6 and returns 6, FAN expects
    # 10 x 0.4 = 4 and returns 24; the excess (20) is all FAN's.
    table = cause_table(alerts({MAR: 10.0}), returns([*BASELINE_ROWS, (MAR, "SEAL", 6), (MAR, "FAN", 24)]))
    assert list(table.columns) == list(BUILD_MONTH_CAUSE_COLUMNS)
    assert list(table["build_month"]) == [MAR, MAR]  # only the flagged month
    assert list(table["failure_code"]) == ["FAN", "SEAL"]  # largest excess first
    fan, seal = table.iloc[0], table.iloc[1]
    assert (fan["observed_returns"], fan["expected_returns"]) == (24.0, pytest.approx(4.0))
    assert fan["ratio"] == pytest.approx(6.0) and fan["baseline_share"] == pytest.approx(0.4)
    assert fan["excess_returns"] == pytest.approx(20.0) and fan["share_of_excess"] == pytest.approx(1.0)
    # reference: scipy.stats.poisson.sf(O - 1, E), P(X >= 24 | mean 4)
    assert fan["p_value"] == pytest.approx(stats.poisson.sf(23, 4.0), rel=1e-12)
    assert (seal["expected_returns"], seal["ratio"]) == (pytest.approx(6.0), pytest.approx(1.0))
    assert seal["excess_returns"] == 0.0 and seal["share_of_excess"] == 0.0 and seal["p_value"] < 1


def test_a_code_unseen_in_the_baseline_expects_nothing_and_shares_of_excess_add_up_to_one():
    # March: SEAL 3 (expects 6: no excess), FAN 8 (expects 4: excess 4), GLASS 2 (no baseline returns:
    # expects 0, excess 2) -> shares of the 6 excess returns 4/6 and 2/6; February flagged with no
    # excess at all -> no share.
    table = cause_table(
        alerts({MAR: 10.0, FEB: 100.0}),
        returns([r for r in BASELINE_ROWS if r[0] != FEB] + [(MAR, "SEAL", 3), (MAR, "FAN", 8), (MAR, "GLASS", 2),
                                                            (FEB, "SEAL", 20), (FEB, "FAN", 10)]),
    )
    march = table[table["build_month"] == MAR].set_index("failure_code")
    # the baseline is January and April only: SEAL 40, FAN 30 -> shares 4/7 and 3/7
    assert march.loc["FAN", "expected_returns"] == pytest.approx(30 / 7)
    assert march.loc["GLASS", "expected_returns"] == 0.0 and math.isnan(march.loc["GLASS", "ratio"])
    assert march.loc["GLASS", "p_value"] == 0.0
    assert march["share_of_excess"].sum() == pytest.approx(1.0)
    assert list(march.index) == ["FAN", "GLASS", "SEAL"]
    february = table[table["build_month"] == FEB]
    assert february["share_of_excess"].isna().all() and (february["excess_returns"] == 0).all()


def test_no_flagged_month_gives_an_empty_table_with_the_columns():
    table = cause_table(alerts({}), returns(BASELINE_ROWS))
    assert len(table) == 0 and list(table.columns) == list(BUILD_MONTH_CAUSE_COLUMNS)


def test_a_code_with_at_least_half_its_returns_in_flagged_months_is_concentrated_there():
    rows = returns([*BASELINE_ROWS, (MAR, "FAN", 24), (MAR, "SEAL", 6), (JAN, "CAP", 4), (MAR, "CAP", 5),
                    (MAR, "GLASS", 2)])
    found = concentrated_codes(alerts({MAR: 10.0}), rows)
    # CAP: 5 of 9 in March; FAN: 24 of 64 (not half); GLASS: 2 of 2 but fewer than 5 returns
    assert found == {("P", "CAP"): "failure code CAP: 5 of its 9 returns are in flagged build month(s) 2024-03"}
    # another product's flagged months do not count
    other = pd.concat([rows, returns([(MAR, "CAP", 9)], product="Q")])
    assert set(concentrated_codes(alerts({MAR: 10.0}), other)) == {("P", "CAP")}


def test_a_failed_mode_fit_of_a_concentrated_code_is_not_a_plain_fit_failure():
    modes = {"P": (
        ModeFit("P", "CAP", ("CAP",), 9.0, "unidentifiable", "the likelihood is flat", None, None),
        ModeFit("P", "other", ("DUST", "GLASS"), 3.0, "unidentifiable", "too few", None, None),
    )}
    sentence = "failure code CAP: 5 of its 9 returns are in flagged build month(s) 2024-03"
    plain = mode_warnings(modes)
    assert plain[0] == "product P, failure mode CAP: no fit (unidentifiable): the likelihood is flat"
    explained = mode_warnings(modes, {("P", "CAP"): sentence})
    assert explained[0].startswith("product P, failure mode CAP: no life fit (unidentifiable), as expected of a"
                                   " defect confined to flagged build months (" + sentence + ")")
    assert explained[1] == plain[1]  # other modes unchanged
    # a concentrated code folded into "other" explains that mode
    assert "failure code GLASS" in mode_warnings(modes, {("P", "GLASS"): "failure code GLASS: 5 of its 5"})[1]
