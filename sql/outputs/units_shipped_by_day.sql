-- units_shipped_by_day: the units shipped each day, for the roll-forward's accruals for units shipped
-- since the opening run's as-of date (stages.roll_forward).
-- Grain: one row per product x build_month x warranty_months x ship_date with a valid shipments row
-- shipped on or before the as-of date.
-- Parameters: none.
-- Reads: units_aged_to_as_of.
-- Sort: product, build_month, warranty_months, ship_date
select
    product,
    build_month,
    warranty_months,
    ship_date,
    sum(units)::bigint as units
from units_aged_to_as_of
group by product, build_month, warranty_months, ship_date
