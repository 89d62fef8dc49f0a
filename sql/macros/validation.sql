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
