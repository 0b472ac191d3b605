-- intermediate.pay_calendar_matches
-- Grain: one row per pay credit and pay calendar slot it can be the payment of.
-- Key: customer_id, payer_id, booking_date, pattern, pattern_param, slot.
-- Reads: intermediate.payroll_credits, intermediate.pay_calendars.
-- Scope: per customer (built per bucket of customers).
-- Parameters: $max_missed_runs, $explained_per_left_over.
-- Only streams of two or more payments, only the calendar families their mean gap allows, and only the
-- calendars that could be a fit (`possible` below).
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
        count(*) as payment_count,
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

possible as (
    -- Only calendars that could be a fit (intermediate.pay_schedule_fits): two matches at least (a
    -- calendar that matched one payment explains nothing: most calendars of a stream), and no more missed
    -- pay days or left-over payments than allowed. A fit explains each match once, so its explained count
    -- is its match count and these are the fit's own conditions (at 100k customers a third of the rows).
    select
        shapes.customer_id,
        shapes.payer_id,
        shapes.pattern,
        shapes.pattern_param
    from (
        select
            matched.customer_id,
            matched.payer_id,
            matched.pattern,
            matched.pattern_param,
            count(*) as match_count,
            max(matched.slot) - min(matched.slot) + 1 - count(*) as missed_runs
        from matched
        group by matched.customer_id, matched.payer_id, matched.pattern, matched.pattern_param
    ) as shapes
    inner join streams on streams.customer_id = shapes.customer_id and streams.payer_id = shapes.payer_id
    where
        shapes.match_count >= 2
        and shapes.missed_runs <= $max_missed_runs
        and streams.payment_count - shapes.match_count <= shapes.match_count // $explained_per_left_over
),

final as (
    select
        matched.*,
        row_number() over (
            partition by matched.customer_id, matched.payer_id, matched.pattern, matched.pattern_param
            order by matched.booking_date desc
        ) as recency
    from matched
    semi join possible
        on
            possible.customer_id = matched.customer_id
            and possible.payer_id = matched.payer_id
            and possible.pattern = matched.pattern
            and possible.pattern_param = matched.pattern_param
)

select * from final
