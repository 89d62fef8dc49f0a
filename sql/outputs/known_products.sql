-- known_products: the product codes of the shipments extract, against which per-product settings in the
-- configuration are checked (a key naming another product is a typo).
-- Grain: one row per product with at least one valid shipments row, whatever its ship date (a product
-- shipped only after the as-of date is still known).
-- Parameters: none.
-- Reads: stg_shipments.
-- Sort: product
with valid_shipments as (
    select product
    from stg_shipments
    where not is_quarantined
)

select distinct product
from valid_shipments
