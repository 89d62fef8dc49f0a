-- validation: macros the staging models use to type values and describe failed checks.
-- A check returns a struct {col, reason, detail} when it fails and NULL when it passes, so that
-- coalesce(check_1, check_2, ...) is the first failed check in the order written.
create or replace macro parse_build_month(text_value) as
    case
        when regexp_full_match(text_value, '\d{4}-\d{2}') then try_strptime(text_value, '%Y-%m')::date
        else date_trunc('month', try_cast(text_value as date))::date
    end;

create or replace macro failed_check(column_name, reason, detail) as
    {'col': column_name, 'reason': reason, 'detail': detail};

create or replace macro check_present(column_name, text_value) as
    case when text_value is null then failed_check(column_name, 'missing_value', column_name || ' is empty') end;

create or replace macro check_parsed(column_name, text_value, parsed_value, expected) as
    case
        when text_value is not null and parsed_value is null
            then failed_check(column_name, 'unparseable_value', column_name || ' ' || text_value || ' is not ' || expected)
    end;

create or replace macro check_that(is_failed, column_name, reason, detail) as
    case when is_failed then failed_check(column_name, reason, detail) end;

-- A date DuckDB parsed but that no real extract holds: before 1900-01-01, or past 9999-12-31 (years such as
-- 12345, and 'infinity', that Python's date cannot hold either).
create or replace macro check_date_in_range(column_name, text_value, parsed_value) as
    check_that(
        parsed_value < date '1900-01-01' or parsed_value > date '9999-12-31',
        column_name, 'date_out_of_range',
        column_name || ' ' || text_value || ' is outside 1900-01-01 .. 9999-12-31'
    );

-- A date after the day of the run: nothing in an extract can have happened yet. run_date is the run's
-- $run_date, passed in by the model (macros take no parameters of their own).
create or replace macro check_not_after_run_date(column_name, text_value, parsed_value, run_date) as
    check_that(
        parsed_value > run_date,
        column_name, 'dated_after_run_date',
        column_name || ' ' || text_value || ' is after the run date ' || strftime(run_date, '%Y-%m-%d')
    );

-- Every check a date column gets, in order: it parses (as `expected` says), it lies in the range above,
-- and it is not after the run date. A required date adds check_present before it.
create or replace macro check_date(column_name, text_value, parsed_value, expected, run_date) as
    coalesce(
        check_parsed(column_name, text_value, parsed_value, expected),
        check_date_in_range(column_name, text_value, parsed_value),
        check_not_after_run_date(column_name, text_value, parsed_value, run_date)
    );

-- A whole number above the configured limit for its column (units per row, warranty months).
create or replace macro check_not_above(column_name, text_value, number_value, limit_value, reason) as
    check_that(
        number_value > limit_value,
        column_name, reason,
        column_name || ' ' || text_value || ' is above the limit ' || limit_value
    );
