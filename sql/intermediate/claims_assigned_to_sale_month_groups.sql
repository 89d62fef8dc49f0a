-- claims_assigned_to_sale_month_groups: each claim on its warranty clock, assigned to the sale-month group
-- the life model counts it in, with whether it counts as a return.
-- Grain: one row per valid staged claim with claim_date on or before the as-of date (quarantined ones
-- included, flagged is_quarantined).
-- Parameters: $counted_statuses (list of statuses that count as returns).
-- Reads: claims_on_warranty_clock, sale_month_groups.
-- Group: the unit's group when joined on serial; else the product x build month group with the same
-- sale month (most units first, then the shorter warranty), else the nearest sale month (earlier first),
-- among groups with units in service. A claim with MIS beyond the group's warranty_months is out of
-- coverage; a counted claim passed every check, has a counted status and is in coverage.
-- A unit counts once in the life model: a unit is a serial within its product x build month (a claim without
-- a serial cannot be tied to a unit and is taken as a distinct unit's claim). unit_claim_number orders a
-- unit's counted claims by failure_date, then claim_date, then claim_id (NULL for claims that are not
-- counted); the first is the unit's return (is_return), the later ones are repeat claims (is_repeat_claim):
-- claims to pay and to reserve for, but not failed units.
-- Open claims (status open or pending: filed, not yet decided; config.ClaimSettings.open_statuses) are a
-- known liability: they always have a counted status, whatever $counted_statuses holds, so they are
-- returns and repeat claims like approved ones (is_open_claim). cost is the settled cost: NULL for an
-- open claim, whose extract cost is an estimate (estimated_cost, NULL when the extract left it empty),
-- so sums and means of cost are of settled claims only.
with clocked_claims as (
    select
        source_row_number,
        claim_id,
        product,
        build_month,
        failure_date,
        claim_date,
        cost,
        status,
        failure_code,
        serial,
        is_unit_found,
        unit_sale_month,
        unit_warranty_months,
        warranty_start_date,
        is_sale_date_imputed,
        claim_sale_month,
        age_months,
        months_in_service,
        is_quarantined,
        problem_column,
        problem_reason,
        problem_detail
    from claims_on_warranty_clock
),

groups_in_service as (
    select product, build_month, sale_month, warranty_months, units
    from sale_month_groups
    where units > units_in_channel
),

candidate_groups as (
    select
        claim.source_row_number,
        sale_group.sale_month,
        sale_group.warranty_months,
        row_number() over (
            partition by claim.source_row_number
            order by
                abs(date_diff('month', sale_group.sale_month, claim.claim_sale_month)),
                sale_group.sale_month,
                sale_group.units desc,
                sale_group.warranty_months
        ) as preference
    from clocked_claims as claim
    join groups_in_service as sale_group
        on claim.product = sale_group.product and claim.build_month = sale_group.build_month
    where not claim.is_quarantined and not claim.is_unit_found
),

assigned_claims as (
    select
        claim.*,
        case when claim.is_unit_found then claim.unit_sale_month else candidate.sale_month end as sale_month,
        case when claim.is_unit_found then claim.unit_warranty_months else candidate.warranty_months end
            as warranty_months
    from clocked_claims as claim
    left join candidate_groups as candidate
        on claim.source_row_number = candidate.source_row_number and candidate.preference = 1
),

claims_with_counted_status as (
    select
        *,
        status in ('open', 'pending') as is_open_status,
        list_contains($counted_statuses, status) or status in ('open', 'pending') as has_counted_status
    from assigned_claims
),

counted_claims as (
    select
        *,
        not is_quarantined and has_counted_status and months_in_service <= warranty_months
            as is_counted_claim
    from claims_with_counted_status
),

claims_numbered_within_unit as (
    select
        *,
        case
            when is_counted_claim then row_number() over (
                partition by
                    is_counted_claim, product, build_month, serial,
                    case when serial is null then source_row_number end
                order by failure_date, claim_date, claim_id
            )
        end as unit_claim_number
    from counted_claims
)

select
    source_row_number,
    claim_id,
    product,
    build_month,
    sale_month,
    warranty_months,
    warranty_start_date,
    is_sale_date_imputed,
    not is_quarantined and sale_month <> claim_sale_month as is_group_reassigned,
    serial is not null and not is_unit_found as is_serial_unknown,
    failure_date,
    claim_date,
    case when not is_open_status then cost end as cost,
    case when is_open_status then cost end as estimated_cost,
    status,
    is_open_status as is_open_claim,
    failure_code,
    serial,
    age_months,
    months_in_service,
    has_counted_status as is_counted_status,
    months_in_service <= warranty_months as is_in_coverage,
    unit_claim_number,
    is_counted_claim and unit_claim_number = 1 as is_return,
    is_counted_claim and unit_claim_number > 1 as is_repeat_claim,
    is_quarantined,
    problem_column,
    problem_reason,
    problem_detail
from claims_numbered_within_unit
