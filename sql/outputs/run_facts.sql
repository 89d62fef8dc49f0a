-- run_facts: counts that explain how the data was read, for the manifest and the run report.
-- Grain: one row per fact.
-- Parameters: none.
-- Reads: units_aged_to_as_of, units_sold_or_in_channel, claims_assigned_to_sale_month_groups,
--   sale_month_group_survivors.
-- Sort: fact
-- returns_counted: units' first counted in-coverage claims (the life model's returns); repeat_claims_counted:
-- the units' later counted in-coverage claims. Claims used = returns_counted + repeat_claims_counted +
-- claims_out_of_coverage + claims_status_not_counted. claims_open: valid claims filed, not yet decided
-- (status open or pending; counted, in or out of coverage).
-- units_sale_date_imputed: whole units without a sale date known by the as-of date (of which
-- units_sold_after_as_of_sale_date_imputed carry a sale date after it); units_in_service_sale_date_imputed
-- and units_in_channel: the expected units of those sold by then and not (units_sold_or_in_channel),
-- each rounded to whole units (so the two may miss units_sale_date_imputed by one).
with unit_facts as (
    select
        sum(units) as units_total,
        sum(case when is_sale_date_imputed then units else 0 end) as units_sale_date_imputed,
        sum(case when is_sold_after_as_of then units else 0 end) as units_sold_after_as_of_sale_date_imputed
    from units_aged_to_as_of
),

unit_part_facts as (
    select
        round(sum(case when is_in_channel then units else 0 end)) as units_in_channel,
        round(sum(case when is_sale_date_imputed and not is_in_channel then units else 0 end))
            as units_in_service_sale_date_imputed
    from units_sold_or_in_channel
),

claim_facts as (
    select
        count(*) filter (where is_return) as returns_counted,
        count(*) filter (where is_repeat_claim) as repeat_claims_counted,
        count(*) filter (where is_counted_status and not is_in_coverage) as claims_out_of_coverage,
        count(*) filter (where status = 'rejected') as claims_rejected,
        count(*) filter (where status = 'no_fault_found') as claims_no_fault_found,
        count(*) filter (where is_open_claim) as claims_open,
        count(*) filter (where not is_counted_status) as claims_status_not_counted,
        count(*) filter (where is_sale_date_imputed) as claims_sale_date_imputed,
        count(*) filter (where is_group_reassigned) as claims_assigned_to_nearest_sale_month,
        count(*) filter (where is_serial_unknown) as claims_with_unknown_serial
    from claims_assigned_to_sale_month_groups
    where not is_quarantined
),

overfull_groups as (
    select count(*) as groups_with_more_returns_than_units
    from sale_month_group_survivors
    where group_returns > group_units
)

unpivot (
    select
        coalesce(unit_facts.units_total, 0)::bigint as units_total,
        coalesce(unit_facts.units_sale_date_imputed, 0)::bigint as units_sale_date_imputed,
        coalesce(unit_part_facts.units_in_channel, 0)::bigint as units_in_channel,
        coalesce(unit_part_facts.units_in_service_sale_date_imputed, 0)::bigint as units_in_service_sale_date_imputed,
        coalesce(unit_facts.units_sold_after_as_of_sale_date_imputed, 0)::bigint
            as units_sold_after_as_of_sale_date_imputed,
        coalesce(claim_facts.returns_counted, 0)::bigint as returns_counted,
        coalesce(claim_facts.repeat_claims_counted, 0)::bigint as repeat_claims_counted,
        coalesce(claim_facts.claims_out_of_coverage, 0)::bigint as claims_out_of_coverage,
        coalesce(claim_facts.claims_rejected, 0)::bigint as claims_rejected,
        coalesce(claim_facts.claims_no_fault_found, 0)::bigint as claims_no_fault_found,
        coalesce(claim_facts.claims_open, 0)::bigint as claims_open,
        coalesce(claim_facts.claims_status_not_counted, 0)::bigint as claims_status_not_counted,
        coalesce(claim_facts.claims_sale_date_imputed, 0)::bigint as claims_sale_date_imputed,
        coalesce(claim_facts.claims_assigned_to_nearest_sale_month, 0)::bigint as claims_assigned_to_nearest_sale_month,
        coalesce(claim_facts.claims_with_unknown_serial, 0)::bigint as claims_with_unknown_serial,
        coalesce(overfull_groups.groups_with_more_returns_than_units, 0)::bigint as groups_with_more_returns_than_units
    from unit_facts, unit_part_facts, claim_facts, overfull_groups
)
on columns(*)
into name fact value count
