-- ages: the day grid of ages. An age in months is days / (365.25 / 12). The warranty start date is day 1 of
-- service: a failure dated d = 0, 1, 2, ... days after it happened at an age in [d, d + 1) days, and month in
-- service k = max(1, ceil(d / (365.25 / 12))) holds the day counts floor((k - 1) * 365.25 / 12) + 1 ..
-- floor(k * 365.25 / 12) (and d = 0 in month 1), so its ages run from month_start_age(k) to month_end_age(k),
-- in months; a unit observed through a date D days after its start has been in service age_through_day(D).
-- The same as lifecore.data.month_interval_ends; every age is computed by these macros, so comparisons
-- between ages and month ends are exact.
create or replace macro age_of_days(days) as days / (365.25 / 12);

create or replace macro age_through_day(days) as age_of_days(days + 1);

create or replace macro month_start_age(k) as
    case when k <= 1 then 0.0 else age_of_days(floor((k - 1) * (365.25 / 12)) + 1) end;

create or replace macro month_end_age(k) as age_of_days(floor(k * (365.25 / 12)) + 1);
