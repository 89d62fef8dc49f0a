-- claim_reporting_delays: the reporting delays of counted returns, with the window in which each could be
-- seen, for estimating the failure-to-claim delay distribution under right truncation.
-- Grain: one row per product x delay_days x observable_days with at least one counted in-coverage return
-- filed by the as-of date.
-- Parameters: $as_of_date.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product, delay_days, observable_days
-- delay_days = claim_date - failure_date (whole days; never negative: staging quarantines a claim dated
-- before its failure). observable_days = as_of - failure_date, the right-truncation bound: a failure on
-- date x is seen only if its delay is at most as_of - x. It is capped at the longest delay_days of all
-- products, which keeps the table small and loses nothing: a claim whose window exceeds every delay lies
-- in every reverse-time risk set it can lie in, per product or pooled over products. The longest delay is
-- a one-row aggregate joined to every row (not a window over all rows, which Spark computes in one
-- partition).
with counted_returns as (
    select
        product,
        date_diff('day', failure_date, claim_date) as delay_days,
        date_diff('day', failure_date, $as_of_date::date) as observable_days
    from claims_assigned_to_sale_month_groups
    where is_return
),

longest_delay as (
    select max(delay_days) as longest_delay_days
    from counted_returns
),

capped as (
    select
        product,
        delay_days,
        least(observable_days, longest_delay_days) as observable_days
    from counted_returns
    cross join longest_delay
)

select
    product,
    delay_days,
    observable_days,
    count(*) as claims
from capped
group by product, delay_days, observable_days
