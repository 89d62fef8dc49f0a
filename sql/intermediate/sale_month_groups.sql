-- sale_month_groups: the groups the life model sees: units of one product and build month whose
-- warranty clock started in the same month, under the same warranty length.
-- Grain: one row per product x build_month x sale_month x warranty_months.
-- Parameters: none.
-- Reads: units_aged_to_as_of.
with aged_units as (
    select product, build_month, sale_month, warranty_months, units, is_in_channel
    from units_aged_to_as_of
)

select
    product,
    build_month,
    sale_month,
    warranty_months,
    sum(units)::bigint as units,
    sum(case when is_in_channel then units else 0 end)::bigint as units_in_channel
from aged_units
group by product, build_month, sale_month, warranty_months
