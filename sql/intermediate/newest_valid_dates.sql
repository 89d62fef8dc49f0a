-- newest_valid_dates: how far each extract reaches, to default the as-of date and judge its freshness.
-- Grain: one row.
-- Parameters: none (runs before the as-of date is known).
-- Reads: stg_shipments, stg_claims.
-- newest_claim_date / newest_ship_date: the latest date among the rows that passed every staging check
-- (so never after the run date); NULL when an extract has no valid row.
with valid_claim_dates as (
    select claim_date
    from stg_claims
    where not is_quarantined
),

valid_ship_dates as (
    select ship_date
    from stg_shipments
    where not is_quarantined
),

newest_claim as (
    select max(claim_date) as newest_claim_date
    from valid_claim_dates
),

newest_shipment as (
    select max(ship_date) as newest_ship_date
    from valid_ship_dates
)

select
    newest_claim.newest_claim_date,
    newest_shipment.newest_ship_date
from newest_claim
cross join newest_shipment
