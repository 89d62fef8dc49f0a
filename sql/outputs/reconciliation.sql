-- reconciliation: what became of every row read from each extract.
-- Grain: one row per extract (shipments, claims).
-- Parameters: none.
-- Reads: extracts_read, units_aged_to_as_of, claims_assigned_to_sale_month_groups,
--   rows_quarantined_with_reason, rows_after_as_of.
-- Sort: extract
-- rows_read = rows_used + rows_quarantined + rows_after_as_of must hold; Python checks it. Each count
-- comes from another table, so a row lost or counted twice between the layers is seen.
with rows_used as (
    select 'shipments' as extract, count(*) as rows_used
    from units_aged_to_as_of
    union all
    select 'claims' as extract, count(*) as rows_used
    from claims_assigned_to_sale_month_groups
    where not is_quarantined
),

rows_quarantined as (
    select extract, count(*) as rows_quarantined
    from rows_quarantined_with_reason
    group by extract
)

select
    extracts_read.extract,
    extracts_read.source_file,
    extracts_read.rows_read,
    rows_used.rows_used,
    coalesce(rows_quarantined.rows_quarantined, 0) as rows_quarantined,
    rows_after_as_of.rows_after_as_of
from extracts_read
join rows_used on extracts_read.extract = rows_used.extract
join rows_after_as_of on extracts_read.extract = rows_after_as_of.extract
left join rows_quarantined on extracts_read.extract = rows_quarantined.extract
