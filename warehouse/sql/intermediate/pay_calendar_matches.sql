-- intermediate.pay_calendar_matches
-- Grain: one row per pay credit and pay calendar slot it can be the payment of.
-- Key: customer_id, payer_id, booking_date, pattern, pattern_param, slot.
-- Reads: intermediate.payroll_credits, intermediate.pay_calendars.
-- Scope: per customer (built per bucket of customers).
-- Only streams of two or more payments, and only the calendar families their mean gap allows.
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

streams as (
    -- mean days between a stream's payments; one payment has no calendar to find
    select
        credits.customer_id,
        credits.payer_id,
        (max(credits.booking_date) - min(credits.booking_date)) / (count(*) - 1) as mean_gap_days
    from credits
    group by credits.customer_id, credits.payer_id
    having count(*) >= 2
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
    inner join streams on streams.customer_id = credits.customer_id and streams.payer_id = credits.payer_id
    inner join calendars on calendars.pay_day = credits.booking_date
    -- Only the calendar families the mean gap allows, wide enough for one missed run (weekly: 3 payments
    -- over 14 days) and for left-over payments (a third of the explained ones); the rest could never be
    -- the best fit (on the demo they were a third of this table's rows).
    where
        case calendars.frequency
            when 'weekly' then streams.mean_gap_days <= 12
            when 'fortnightly' then streams.mean_gap_days between 9 and 31
            when 'semi_monthly' then streams.mean_gap_days between 9 and 31
            else streams.mean_gap_days >= 16
        end
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
