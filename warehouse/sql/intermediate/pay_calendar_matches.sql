-- intermediate.pay_calendar_matches
-- Grain: one row per pay credit and pay calendar slot it can be the payment of.
-- Key: customer_id, payer_id, booking_date, pattern, pattern_param, slot.
-- Reads: intermediate.payroll_credits, intermediate.pay_calendars.
-- recency: 1 for the latest credit a calendar matches in the stream, 2 for the one before, …
-- Materialized as a table so that intermediate.pay_schedule_fits aggregates a plain table (at 100k
-- customers, one query over the whole chain spilled gigabytes to disk).

with

credits as (
    select * from intermediate.payroll_credits
),

calendars as (
    select * from intermediate.pay_calendars
),

matched as (
    select
        credits.customer_id,
        credits.payer_id,
        calendars.pattern,
        calendars.pattern_param,
        calendars.frequency,
        calendars.slot,
        calendars.nominal_day,
        calendars.moved,
        credits.booking_date,
        credits.amount
    from credits
    inner join calendars on calendars.pay_day = credits.booking_date
),

final as (
    select
        matched.*,
        row_number() over (
            partition by matched.customer_id, matched.payer_id, matched.pattern, matched.pattern_param
            order by matched.booking_date desc
        ) as recency
    from matched
)

select * from final
