-- claim_cost_by_product: the observed cost of a counted claim, per product: first claims (returns) and
-- repeat claims of the same units alike, as the reserve prices both.
-- Grain: one row per product with at least one counted in-coverage claim.
-- Parameters: $as_of_date, $cost_window_months.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product
-- window_mean_cost: mean cost (currency units) of counted claims filed in the trailing window ending at
-- the as-of date; all_time_mean_cost: over every counted claim filed by the as-of date (the columns keep
-- their names: window_returns and all_time_returns count those claims); window_cost_sd, all_time_cost_sd:
-- the sample standard deviation of those costs (NULL for a single claim), the spread of single claims
-- that the reserve's prediction interval carries.
with counted_claims as (
    select product, claim_date, cost
    from claims_assigned_to_sale_month_groups
    where is_return or is_repeat_claim
),

window_start as (
    select ($as_of_date::date - to_months($cost_window_months))::date as first_excluded_date
)

select
    product,
    count(*) filter (where claim_date > window_start.first_excluded_date) as window_returns,
    avg(cost) filter (where claim_date > window_start.first_excluded_date)::double as window_mean_cost,
    stddev_samp(cost) filter (where claim_date > window_start.first_excluded_date)::double as window_cost_sd,
    count(*) as all_time_returns,
    avg(cost)::double as all_time_mean_cost,
    stddev_samp(cost)::double as all_time_cost_sd
from counted_claims
cross join window_start
group by product
