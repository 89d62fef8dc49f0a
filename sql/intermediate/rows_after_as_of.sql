-- rows_after_as_of: the valid rows of each extract dated after the as-of date (shipped, or claimed, after
-- it): read and checked, but outside this run's picture.
-- Grain: one row per extract (shipments, claims).
-- Parameters: $as_of_date.
-- Reads: stg_shipments, stg_claims.
-- A model of its own (not a CTE of reconciliation) so that the staging tables are done early and their
-- memory is free for the later models (sql_runner.tables_done_after).
select 'shipments' as extract, count(*) as rows_after_as_of
from stg_shipments
where not is_quarantined and ship_date > $as_of_date
union all
select 'claims' as extract, count(*) as rows_after_as_of
from stg_claims
where not is_quarantined and claim_date > $as_of_date
