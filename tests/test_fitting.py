"""The fit stage: fallbacks for thin or unidentifiable data, and the life_model table."""

from __future__ import annotations

import numpy as np
import pytest

from warranty_forecast.config import LifeModelSettings
from warranty_forecast.stages.fitting import (
    FITTED,
    FIXED_SHAPE,
    INSUFFICIENT_DATA,
    LIFE_MODEL_COLUMNS,
    UNIDENTIFIABLE,
    fit_products,
    fit_weibull,
    life_model_table,
)
from warranty_forecast.lifecore.data import LifeData
from simulated_data import simulated_life_data  # tests/ is on sys.path under pytest

pytestmark = pytest.mark.filterwarnings("error")


THIN = LifeData.from_monthly_returns([2, 5, 9], [1, 1, 1], [6.0, 12.0, 24.0], [300.0, 300.0, 300.0], day_grid=False)
# returns only in the first three months among a million units observed for three months:
# shape and scale cannot both be identified
FLAT = LifeData.from_monthly_returns([1, 2, 3], [5, 5, 6], [3.0], [1e6], day_grid=False)


def test_thin_data_without_a_configured_shape_has_no_fit():
    outcome = fit_weibull(THIN, LifeModelSettings(), fixed_shape=None)
    assert outcome.status == INSUFFICIENT_DATA and outcome.fit is None
    assert "life_model.fixed_shape" in outcome.message


def test_thin_data_with_a_configured_shape_estimates_the_scale_only():
    outcome = fit_weibull(THIN, LifeModelSettings(), fixed_shape=2.0)
    assert outcome.status == FIXED_SHAPE and outcome.fit.fixed and outcome.fit.shape == 2.0
    assert "shape fixed at 2" in outcome.message
    lower, upper = outcome.fit.bounds("scale")
    assert lower < outcome.fit.scale < upper


def test_unidentifiable_data_is_reported_or_falls_back_on_the_configured_shape():
    outcome = fit_weibull(FLAT, LifeModelSettings(), fixed_shape=None)
    assert outcome.status == UNIDENTIFIABLE and outcome.fit is None
    fallback = fit_weibull(FLAT, LifeModelSettings(), fixed_shape=1.0)
    assert fallback.status == FIXED_SHAPE and fallback.fit.shape == 1.0


def test_life_model_table_has_bounds_diagnostics_and_statuses():
    data = {"GOOD": simulated_life_data(3, 40_000, 1.6, 150.0), "THIN": THIN}
    fits = fit_products(data, LifeModelSettings(), {"GOOD": 24, "THIN": 24})
    table = life_model_table(fits, {"GOOD": 40_000.0, "THIN": 900.0}).set_index("product")
    assert list(table.reset_index().columns) == list(LIFE_MODEL_COLUMNS)
    good = table.loc["GOOD"]
    assert good["status"] == FITTED and good["converged"] and good["lr_bounds_finite"]
    for name in ("shape", "scale", "b1", "b10", "fraction_failed_at_warranty_end"):
        assert good[f"{name}_lr_lower"] < good[name] < good[f"{name}_lr_upper"], name
        assert good[f"{name}_lower"] < good[name] < good[f"{name}_upper"], name
    # the simulated truth (shape 1.6, scale 150) inside the likelihood-ratio bounds
    assert good["shape_lr_lower"] < 1.6 < good["shape_lr_upper"]
    assert good["scale_lr_lower"] < 150.0 < good["scale_lr_upper"]
    assert 0.0 <= good["gof_p_value"] <= 1.0 and good["gof_df"] >= 1
    assert good["delta_aic_weibull_minus_lognormal"] < 0 and not good["prefers_lognormal"]
    thin = table.loc["THIN"]
    assert thin["status"] == INSUFFICIENT_DATA and np.isnan(thin["shape"]) and not thin["converged"]


def test_returns_all_in_month_one_raise_no_overflow_and_are_unidentifiable():
    # every return in month 1 and the survivors at 1 and 24 months: the shape runs to 0 (found in review:
    # this once raised a bare OverflowError)
    data = LifeData.from_monthly_returns([1], [50], [1.0, 24.0], [1000.0, 5000.0], day_grid=False)
    assert fit_weibull(data, LifeModelSettings(), fixed_shape=None).status == UNIDENTIFIABLE


def test_open_likelihood_ratio_interval_for_shape_is_not_published_as_a_fit():
    # 500 returns in month 1 and 10 units alive at half a month: any very large shape with scale in
    # (0.5, 1] explains the data, so the likelihood never bounds the shape from above
    data = LifeData.from_monthly_returns([1], [500], [0.5], [10.0], day_grid=False)
    outcome = fit_weibull(data, LifeModelSettings(), fixed_shape=None)
    assert outcome.status == UNIDENTIFIABLE and outcome.fit is None
    assert "shape upper" in outcome.message
