-- reconciliation: what became of every row read from each extract.
-- Grain: one row per extract (shipments, claims).
-- Parameters: $shipments_file, $claims_file (the absolute paths, as in quarantine), $as_of_date.
-- Reads: raw_*, raw_*_malformed, stg_shipments, stg_claims, units_aged_to_as_of, claims_matched_to_units.
-- rows_read = rows_used + rows_quarantined + rows_after_as_of must hold; Python checks it.
with shipment_counts as (
    select
        'shipments' as extract,
        $shipments_file as source_file,
        (select count(*) from raw_shipments) + (select count(*) from raw_shipments_malformed) as rows_read,
        (select count(*) from units_aged_to_as_of) as rows_used,
        (select count(*) from stg_shipments where is_quarantined)
            + (select count(*) from raw_shipments_malformed) as rows_quarantined,
        (select count(*) from stg_shipments where not is_quarantined and ship_date > $as_of_date)
            as rows_after_as_of
),

claim_counts as (
    select
        'claims' as extract,
        $claims_file as source_file,
        (select count(*) from raw_claims) + (select count(*) from raw_claims_malformed) as rows_read,
        (select count(*) from claims_matched_to_units where not is_quarantined) as rows_used,
        (select count(*) from stg_claims where is_quarantined)
            + (select count(*) from raw_claims_malformed)
            + (select count(*) from claims_matched_to_units where is_quarantined) as rows_quarantined,
        (select count(*) from stg_claims where not is_quarantined and claim_date > $as_of_date)
            as rows_after_as_of
)

select extract, source_file, rows_read, rows_used, rows_quarantined, rows_after_as_of
from shipment_counts
union all
select extract, source_file, rows_read, rows_used, rows_quarantined, rows_after_as_of
from claim_counts
