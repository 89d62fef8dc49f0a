-- stg_shipments: the shipments extract typed and checked.
-- Grain: one row per data row of the shipments file (a unit, or a lot of identical units).
-- Parameters: none (the as-of date and defaults apply in intermediate models).
-- Reads: raw_shipments (every contract column as text, plus source_row_number).
-- A row that fails a check carries the FIRST failed check, in the order written below, as
-- problem_column / problem_reason (a stable code) / problem_detail (for people); valid rows carry nulls.
with raw_rows as (
    select
        source_row_number,
        product,
        build_month,
        ship_date,
        sale_date,
        units,
        warranty_months,
        serial
    from raw_shipments
),

trimmed_text as (
    select
        source_row_number,
        nullif(trim(product), '') as product_text,
        nullif(trim(build_month), '') as build_month_text,
        nullif(trim(ship_date), '') as ship_date_text,
        nullif(trim(sale_date), '') as sale_date_text,
        nullif(trim(units), '') as units_text,
        nullif(trim(warranty_months), '') as warranty_months_text,
        nullif(trim(serial), '') as serial_text
    from raw_rows
),

typed_values as (
    select
        *,
        case
            when regexp_full_match(build_month_text, '\d{4}-\d{2}')
                then try_strptime(build_month_text, '%Y-%m')::date
            else date_trunc('month', try_cast(build_month_text as date))::date
        end as parsed_build_month,
        try_cast(ship_date_text as date) as parsed_ship_date,
        try_cast(sale_date_text as date) as parsed_sale_date,
        try_cast(units_text as double) as units_number,
        try_cast(warranty_months_text as double) as warranty_months_number
    from trimmed_text
),

row_checks as (
    select
        *,
        case
            when product_text is null
                then {'col': 'product', 'reason': 'missing_value', 'detail': 'product is empty'}
            when build_month_text is null
                then {'col': 'build_month', 'reason': 'missing_value', 'detail': 'build_month is empty'}
            when parsed_build_month is null
                then {'col': 'build_month', 'reason': 'unparseable_value',
                      'detail': 'build_month ' || build_month_text || ' is not YYYY-MM or a date'}
            when ship_date_text is null
                then {'col': 'ship_date', 'reason': 'missing_value', 'detail': 'ship_date is empty'}
            when parsed_ship_date is null
                then {'col': 'ship_date', 'reason': 'unparseable_value',
                      'detail': 'ship_date ' || ship_date_text || ' is not a date'}
            when sale_date_text is not null and parsed_sale_date is null
                then {'col': 'sale_date', 'reason': 'unparseable_value',
                      'detail': 'sale_date ' || sale_date_text || ' is not a date'}
            when units_text is not null and (units_number is null or not isfinite(units_number))
                then {'col': 'units', 'reason': 'unparseable_value',
                      'detail': 'units ' || units_text || ' is not a number'}
            when units_number is not null and units_number < 1
                then {'col': 'units', 'reason': 'units_below_one',
                      'detail': 'units ' || units_text || ' is below 1'}
            when units_number is not null and units_number <> floor(units_number)
                then {'col': 'units', 'reason': 'not_a_whole_number',
                      'detail': 'units ' || units_text || ' is not a whole number'}
            when warranty_months_text is not null
                and (warranty_months_number is null or not isfinite(warranty_months_number))
                then {'col': 'warranty_months', 'reason': 'unparseable_value',
                      'detail': 'warranty_months ' || warranty_months_text || ' is not a number'}
            when warranty_months_number is not null
                and (warranty_months_number < 1 or warranty_months_number <> floor(warranty_months_number))
                then {'col': 'warranty_months', 'reason': 'invalid_warranty_months',
                      'detail': 'warranty_months ' || warranty_months_text || ' is not a whole number >= 1'}
            when parsed_ship_date < parsed_build_month
                then {'col': 'ship_date', 'reason': 'shipped_before_build',
                      'detail': 'ship_date ' || parsed_ship_date || ' is before build month '
                          || strftime(parsed_build_month, '%Y-%m')}
            when parsed_sale_date < parsed_ship_date
                then {'col': 'sale_date', 'reason': 'sold_before_shipped',
                      'detail': 'sale_date ' || parsed_sale_date || ' is before ship_date ' || parsed_ship_date}
            when serial_text is not null and coalesce(units_number, 1) <> 1
                then {'col': 'units', 'reason': 'serial_with_many_units',
                      'detail': 'a row with serial ' || serial_text || ' holds ' || units_text || ' units'}
        end as row_problem
    from typed_values
),

serial_occurrences as (
    select
        *,
        case
            when row_problem is null and serial_text is not null
                then row_number() over (partition by serial_text, row_problem is null order by source_row_number)
        end as serial_occurrence,
        case
            when row_problem is null and serial_text is not null
                then first_value(source_row_number) over (
                    partition by serial_text, row_problem is null order by source_row_number
                )
        end as first_row_with_serial
    from row_checks
),

checked_rows as (
    select
        *,
        coalesce(
            row_problem,
            case
                when serial_occurrence > 1
                    then {'col': 'serial', 'reason': 'duplicate_serial',
                          'detail': 'serial ' || serial_text || ' first appears at row ' || first_row_with_serial}
            end
        ) as problem
    from serial_occurrences
)

select
    source_row_number,
    product_text as product,
    parsed_build_month as build_month,
    parsed_ship_date as ship_date,
    parsed_sale_date as sale_date,
    case when problem is null then coalesce(units_number, 1)::bigint end as units,
    case when problem is null then warranty_months_number::integer end as warranty_months,
    serial_text as serial,
    problem is not null as is_quarantined,
    problem.col as problem_column,
    problem.reason as problem_reason,
    problem.detail as problem_detail
from checked_rows
