"""Each stage says what its reader must hear, from its own typed results (common practice, no source)."""

from __future__ import annotations

import dataclasses

from simulated_data import simulated_life_data
from warranty_forecast.config import LifeModelSettings
from warranty_forecast.stages.fitting import fit_products, product_warnings
from warranty_forecast.stages.forecasting import choose_forecast_models


def fits(settings: LifeModelSettings):
    data = {"P": simulated_life_data(3, 20000, shape=1.5, scale=60.0), "THIN": simulated_life_data(4, 40, 1.5, 600.0)}
    return fit_products(data, settings, {"P": 24, "THIN": 24})


def test_goodness_of_fit_warning_follows_its_configured_threshold():
    settings = LifeModelSettings()
    products = fits(settings)
    p_value = products["P"].goodness.chi_square_p_value
    below = dataclasses.replace(settings, goodness_of_fit_warning_p_value=min(0.999, p_value * 2))
    above = dataclasses.replace(settings, goodness_of_fit_warning_p_value=p_value / 2)
    assert any("depart from the Weibull" in w and w.startswith("product P:") for w in product_warnings(products, below))
    assert not any("depart from the Weibull" in w for w in product_warnings(products, above))


def test_a_product_without_a_model_is_named_and_has_no_forecast():
    products = fits(LifeModelSettings(min_returns=50))
    assert products["THIN"].status == "insufficient_data"
    assert any(w.startswith("product THIN: no life model, no forecast and no reserve") for w in product_warnings(
        products, LifeModelSettings(min_returns=50)))
    models, names, notes = choose_forecast_models(products, {}, "lognormal")
    assert "THIN" not in models  # the lognormal needs min_returns too, and there is no Weibull to fall back on
    assert names["P"] == "lognormal" and notes == []
