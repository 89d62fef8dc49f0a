-- fit_suspensions: units still running at the end of their observation, the right-censored part of the
-- life model's input, and the base of the forecast.
-- Grain: one row per product x build_month x sale_month x warranty_months x warranty_start_date.
-- Parameters: none.
-- Reads: suspensions_shared_by_start_date.
-- Sort: product, build_month, sale_month, warranty_months, warranty_start_date
select
    product,
    build_month,
    sale_month,
    warranty_months,
    warranty_start_date,
    observed_age_months,
    is_in_channel,
    units,
    suspensions
from suspensions_shared_by_start_date
