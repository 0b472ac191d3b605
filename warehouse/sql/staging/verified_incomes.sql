-- staging.verified_incomes
-- Grain: one row per customer_id. Key: customer_id.
-- Reads: ops.verified_income_runs, raw.verified_incomes, quarantine.verified_incomes.
-- Parameters: $run_id.
-- The verified incomes the modelling side reads: the records of the verified incomes file this run read
-- that its suite accepted for this run's period (tasks/quality/verified.py quarantines the others, a
-- customer listed twice included, so one row per customer is left). Empty when the run had no such file
-- or has not checked it. Personal data: never published, never in a report; counts only leave the
-- warehouse. The columns are an interface (docs/verified_incomes.md): customer_id, verified_on,
-- annual_net_income (ledger currency, per year, net), source.

with

this_run as (
    select
        runs.run_id,
        runs.load_id
    from ops.verified_income_runs as runs
    where runs.run_id = $run_id and runs.load_id is not null and runs.checked_at is not null
),

records as (
    select received.*
    from raw.verified_incomes as received
    inner join this_run on this_run.load_id = received.load_id
),

accepted as (
    select records.*
    from records
    anti join quarantine.verified_incomes as q
        on
            q.run_id = $run_id
            and q.load_id = records.load_id
            and q.source_line = records.source_line
),

final as (
    select
        customer_id::varchar as customer_id,
        strptime(verified_on, '%Y-%m-%d')::date as verified_on,
        annual_net_income::decimal(18, 2)::double as annual_net_income,
        source::varchar as source  -- noqa: RF04
    from accepted
)

select * from final
