-- safety_term_claims: valid claims whose failure code mentions a safety-relevant term (alerts.safety_terms),
-- listed apart as a signal for qualified engineers; the pipeline does not assess safety.
-- Grain: one row per valid claim filed by the as-of date whose failure_code matches at least one term.
-- Parameters: $safety_terms (list of terms, letters only; an empty list gives no rows).
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product, claim_date, claim_id, source_row_number
-- Claims of every status (approved, rejected, no_fault_found) and in or out of coverage are listed, with
-- status, is_return and is_repeat_claim shown: a rejected claim or one past its warranty may still
-- describe a hazard.
-- Claims that failed a check are not here (they are in quarantine, with the row as read), nor are claims
-- filed after the as-of date. Only failure_code is searched: the claims contract has no free-text column.
-- Matching, case-insensitive: the code's words are its runs of letters (any other character separates
-- them); a term matches when the code's letters, read from the start of one of its words with the
-- separators skipped, begin with the term. So 'overheat' matches OVERHEATED, OVER_HEAT and MOTOR_OVERHEAT,
-- 'fire' matches FIRE_DAMAGE but neither FIRMWARE nor MISFIRE. matched_terms keeps the order of the terms.
with valid_claims as (
    select
        source_row_number,
        claim_id,
        product,
        build_month,
        failure_date,
        claim_date,
        months_in_service,
        failure_code,
        status,
        is_return,
        is_repeat_claim,
        cost
    from claims_assigned_to_sale_month_groups
    where not is_quarantined
),

search_terms as (
    select list_transform($safety_terms::varchar[], lambda term: lower(term)) as terms
),

code_words as (
    select
        *,
        string_split_regex(lower(failure_code), '[^\p{L}]+') as words
    from valid_claims
    where failure_code is not null
),

code_read_from_each_word as (
    select
        *,
        list_transform(range(1, len(words) + 1), lambda start: array_to_string(words[start:], '')) as readings
    from code_words
),

claims_with_matched_terms as (
    select
        claim.*,
        list_filter(
            search_terms.terms,
            lambda term: len(list_filter(claim.readings, lambda reading: starts_with(reading, term))) > 0
        ) as matched_terms
    from code_read_from_each_word as claim
    cross join search_terms
)

select
    product,
    build_month,
    claim_id,
    failure_date,
    claim_date,
    months_in_service,
    failure_code,
    status,
    is_return,
    is_repeat_claim,
    cost,
    matched_terms,
    source_row_number
from claims_with_matched_terms
where len(matched_terms) > 0
