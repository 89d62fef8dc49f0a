-- stg_shipments: the shipments extract typed and checked.
-- Grain: one row per data row of the shipments file (a unit, or a lot of identical units).
-- Parameters: $run_date (no date may be later), $max_units_per_row, $max_warranty_months (the limits
--   from the configuration; the as-of date and defaults apply in intermediate models).
-- Reads: raw_shipments.
-- raw_shipments holds every contract column as text, plus source_row_number; the checks are the macros
-- of macros/validation.
-- A row that fails a check carries the FIRST failed check, in the order written below, as
-- problem_column / problem_reason (a stable code) / problem_detail (for people); valid rows carry nulls.
-- Numbers are parsed as double (text of any size gives a number, inf or NaN, never an error) and cast to
-- integers only on rows that passed every check, so that no cast can overflow.
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
        parse_build_month(build_month_text) as parsed_build_month,
        try_cast(ship_date_text as date) as parsed_ship_date,
        try_cast(sale_date_text as date) as parsed_sale_date,
        try_cast(units_text as double) as units_number,
        try_cast(warranty_months_text as double) as warranty_months_number
    from trimmed_text
),

row_checks as (
    select
        *,
        coalesce(
            check_present('product', product_text),
            check_present('build_month', build_month_text),
            check_date('build_month', build_month_text, parsed_build_month, 'YYYY-MM or a date', $run_date),
            check_present('ship_date', ship_date_text),
            check_date('ship_date', ship_date_text, parsed_ship_date, 'a date', $run_date),
            check_date('sale_date', sale_date_text, parsed_sale_date, 'a date', $run_date),
            check_parsed('units', units_text, if(isfinite(units_number), units_number, null), 'a number'),
            check_that(units_number < 1, 'units', 'units_below_one', 'units ' || units_text || ' is below 1'),
            check_that(
                units_number <> floor(units_number),
                'units', 'not_a_whole_number', 'units ' || units_text || ' is not a whole number'
            ),
            check_not_above('units', units_text, units_number, $max_units_per_row, 'units_above_limit'),
            check_parsed(
                'warranty_months', warranty_months_text,
                if(isfinite(warranty_months_number), warranty_months_number, null), 'a number'
            ),
            check_that(
                warranty_months_number < 1 or warranty_months_number <> floor(warranty_months_number),
                'warranty_months', 'invalid_warranty_months',
                'warranty_months ' || warranty_months_text || ' is not a whole number >= 1'
            ),
            check_not_above(
                'warranty_months', warranty_months_text, warranty_months_number, $max_warranty_months,
                'warranty_months_above_limit'
            ),
            check_that(
                parsed_ship_date < parsed_build_month,
                'ship_date', 'shipped_before_build',
                'ship_date ' || parsed_ship_date || ' is before build month ' || strftime(parsed_build_month, '%Y-%m')
            ),
            check_that(
                parsed_sale_date < parsed_ship_date,
                'sale_date', 'sold_before_shipped',
                'sale_date ' || parsed_sale_date || ' is before ship_date ' || parsed_ship_date
            ),
            check_that(
                serial_text is not null and coalesce(units_number, 1) <> 1,
                'units', 'serial_with_many_units', 'a row with serial ' || serial_text || ' holds ' || units_text || ' units'
            )
        ) as row_problem
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
            check_that(
                serial_occurrence > 1,
                'serial', 'duplicate_serial', 'serial ' || serial_text || ' first appears at row ' || first_row_with_serial
            )
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
