-- extracts_read: each extract's file and how many data rows were read from it.
-- Grain: one row per extract (shipments, claims).
-- Parameters: $shipments_file, $claims_file (each extract's path as given, made absolute, so that two
--   extracts with the same file name can be told apart).
-- Reads: raw_shipments, raw_shipments_malformed, raw_claims, raw_claims_malformed.
-- rows_read: the rows DuckDB could split plus the malformed lines (a CSV's header line is not a row).
with shipment_rows as (
    select
        (select count(*) from raw_shipments) + (select count(*) from raw_shipments_malformed) as rows_read
),

claim_rows as (
    select (select count(*) from raw_claims) + (select count(*) from raw_claims_malformed) as rows_read
)

select 'shipments' as extract, $shipments_file as source_file, rows_read
from shipment_rows
union all
select 'claims' as extract, $claims_file as source_file, rows_read
from claim_rows
