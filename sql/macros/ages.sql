-- ages: the day grid of ages. An age in months is whole days / (365.25 / 12). A failure dated d days after
-- the warranty start failed during its d-th day of service (d = 0 counts as day 1), and month in service
-- k = max(1, ceil(d / (365.25 / 12))) holds the days floor((k - 1) * 365.25 / 12) + 1 .. floor(k * 365.25 / 12),
-- so its ages run from month_start_age(k) (exclusive) to month_end_age(k) (inclusive), in months.
-- The same as lifecore.data.month_interval_ends. An age of whole days d is age_of_days(d): computed the same
-- way everywhere, so comparisons between ages and month ends are exact.
create or replace macro age_of_days(days) as days / (365.25 / 12);

create or replace macro month_start_age(k) as age_of_days(floor((k - 1) * (365.25 / 12)));

create or replace macro month_end_age(k) as age_of_days(floor(k * (365.25 / 12)));
