-- sale_month_groups: the groups the life model sees: units of one product and build month whose
-- warranty clock started in the same month, under the same warranty length.
-- Grain: one row per product x build_month x sale_month x warranty_months.
-- Parameters: none.
-- Reads: units_sold_or_in_channel.
-- units and units_in_channel are expected counts: a row without a known sale date is split into a sold and
-- a channel part (units_sold_or_in_channel), so they may be fractional (exact binary fractions).
with unit_parts as (
    select product, build_month, sale_month, warranty_months, units, is_in_channel
    from units_sold_or_in_channel
)

select
    product,
    build_month,
    sale_month,
    warranty_months,
    sum(units)::double as units,
    sum(case when is_in_channel then units else 0 end)::double as units_in_channel
from unit_parts
group by product, build_month, sale_month, warranty_months
