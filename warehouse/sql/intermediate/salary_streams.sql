-- intermediate.salary_streams
-- Grain: one row per (customer_id, payer_id) stream of payroll credits inside the window.
-- Key: customer_id, payer_id.
-- Reads: intermediate.payroll_credits, ref.pay_frequencies.
-- Parameters: $window_end (date, inclusive).
-- Regular payments are those between 60% and 160% of the stream's median amount (our choice: a pay rise
-- stays regular, a bonus or a small top-up does not); only they set the frequency and the pay amount.
-- Pay frequency comes from the median gap in days between consecutive regular pay dates (robust to one
-- date moved by a weekend or holiday). The pay amount is the median of the latest three regular
-- payments, so a pay rise takes over after two payments. A stream is current when its last payment
-- (of any amount) is no older than its own longest expected gap (plus a week) at the window's end.

with

payroll_credits as (
    select * from intermediate.payroll_credits
),

stream_typical as (
    select
        customer_id,
        payer_id,
        median(amount) as typical_amount,
        count(*)::bigint as all_payment_count,
        sum(amount) as total_paid,
        max(booking_date) as last_any_pay_date
    from payroll_credits
    group by all
),

regular_credits as (
    select payroll_credits.*
    from payroll_credits
    inner join stream_typical
        on
            stream_typical.customer_id = payroll_credits.customer_id
            and stream_typical.payer_id = payroll_credits.payer_id
    where
        payroll_credits.amount
        between 0.6 * stream_typical.typical_amount and 1.6 * stream_typical.typical_amount
),

sequenced as (
    select
        *,
        booking_date - lag(booking_date) over (
            partition by customer_id, payer_id order by booking_date
        ) as gap_days,
        row_number() over (
            partition by customer_id, payer_id order by booking_date desc, amount desc
        ) as recency_rank
    from regular_credits
),

streams as (
    select
        customer_id,
        payer_id,
        count(*)::bigint as payment_count,
        min(booking_date) as first_pay_date,
        max(booking_date) as last_pay_date,
        median(gap_days) as median_gap_days,
        median(amount) filter (where recency_rank <= 3) as pay_amount
    from sequenced
    group by all
),

matched as (
    select
        streams.*,
        stream_typical.all_payment_count - streams.payment_count as extra_payment_count,
        stream_typical.total_paid,
        stream_typical.last_any_pay_date,
        coalesce(freq.frequency, 'irregular') as pay_frequency,
        freq.periods_per_year,
        freq.max_gap_days
    from streams
    inner join stream_typical
        on
            stream_typical.customer_id = streams.customer_id
            and stream_typical.payer_id = streams.payer_id
    left join ref.pay_frequencies as freq
        on streams.median_gap_days between freq.min_gap_days and freq.max_gap_days
),

classified as (
    -- The rhythm must also explain how many payments there were: over the span from first to last
    -- regular payment it predicts span x periods_per_year / 365.25 + 1 of them. A stream off by more
    -- than half a payment (an extra payment on another day can fake a shorter median gap) is
    -- irregular: no label, and the model estimates the customer instead of a doubled salary.
    select
        * replace (
            case when expected_ok then pay_frequency else 'irregular' end as pay_frequency,
            case when expected_ok then periods_per_year end as periods_per_year
        )
    from (
        select
            *,
            abs(payment_count - ((last_pay_date - first_pay_date) * periods_per_year / 365.25 + 1)) <= 0.5
                as expected_ok
        from matched
    ) as rhythm_check
),

final as (
    select
        customer_id,
        payer_id,
        payment_count,
        extra_payment_count,
        first_pay_date,
        last_pay_date,
        median_gap_days,
        pay_frequency,
        periods_per_year,
        pay_amount::double as pay_amount,
        total_paid::double as total_paid,
        coalesce($window_end::date - last_any_pay_date <= max_gap_days + 7, false) as is_current,
        case
            when periods_per_year is not null then round(pay_amount::double * periods_per_year, 2)
        end as annual_salary
    from classified
)

select * from final
