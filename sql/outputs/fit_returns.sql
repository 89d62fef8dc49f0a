-- fit_returns: counted in-coverage returns, the interval-censored part of the life model's input.
-- Grain: one row per product x build_month x sale_month x warranty_months x months_in_service that has
-- at least one return (returns in months in service k failed in the age interval (k-1, k] months).
-- Parameters: none.
-- Reads: returns_counted_by_group_and_month.
-- Sort: product, build_month, sale_month, warranty_months, months_in_service
select
    product,
    build_month,
    sale_month,
    warranty_months,
    months_in_service,
    returns,
    return_cost
from returns_counted_by_group_and_month
