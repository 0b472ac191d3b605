-- intermediate.salary_streams
-- Grain: one row per (customer_id, payer_id) stream of pay credits inside the window.
-- Key: customer_id, payer_id.
-- Reads: intermediate.payroll_credits, intermediate.pay_schedule_fits.
-- Scope: per customer (built per bucket of customers).
-- Parameters: $window_end (date, inclusive), $due_grace_days, $max_last_pay_change, $early_pay_days,
-- $unexplained_current_days.
-- Each stream takes the pay calendar that explains its payments best: fewest missed runs plus extras,
-- then a steady amount over the explained payments, then fewest payments moved off their nominal day.
-- A stream is
--   classified   one calendar wins, and no calendar of another frequency explains it as well;
--   ambiguous    calendars of different frequencies explain it equally well (e.g. two payments 14 days
--                apart on the 1st and 15th: fortnightly or semi-monthly), or only a four-weekly calendar
--                with too few payments to tell it from monthly: no label is better than a wrong one;
--   unsettled    classified, but the last payment differs from the pay amount by more than
--                $max_last_pay_change: a pay rise on the last pay day cannot be told from a bonus paid
--                with it, so there is no label until the next payment settles it;
--   unclassified no calendar explains it.
-- A classified stream is current when its next payment was not due by the window's end (plus
-- $due_grace_days for late postings): at the window's end a missed run cannot be told from leaving, and
-- when one employer stops and another starts, only the later one is current. Other streams are current
-- when paid within the last payroll.unexplained_current_days (+ grace): an unexplained stream that is
-- still paying.
-- The pay amount is the median of the last three explained payments (a pay rise takes over after two).
-- Bonuses are reported, never annualised: payments the calendar leaves over, and the part of an
-- explained payment over payroll.same_day_bonus_multiple times the pay amount, above the pay amount (a
-- bonus paid on the pay day).
-- Label: net pay received (after tax and deductions), excluding bonuses, per year.

with

credits as (
    select * from intermediate.payroll_credits
),

fits as (
    select
        pay_schedule_fits.*,
        -- a missed run and a payment left over weigh the same: three payments on the 15th and one on the
        -- 1st are monthly pay and a bonus, or semi-monthly pay with a run missed
        pay_schedule_fits.missed_runs + pay_schedule_fits.extra_count as misfit
    from intermediate.pay_schedule_fits
),

streams as (
    select
        credits.customer_id,
        credits.payer_id,
        any_value(credits.income_kind) as income_kind,
        count(*)::bigint as payment_count,
        sum(credits.amount) as total_paid,
        max(credits.booking_date) as last_any_pay_date,
        bool_or(credits.is_coded) as is_coded
    from credits
    group by credits.customer_id, credits.payer_id
),

ranked as (
    select
        fits.*,
        row_number() over (
            partition by fits.customer_id, fits.payer_id
            order by
                fits.misfit asc, fits.is_steady desc, fits.is_choosable desc, fits.moved_count asc,
                fits.pattern asc, fits.pattern_param asc
        ) as fit_rank
    from fits
),

lowest_misfit as (
    select
        fits.customer_id,
        fits.payer_id,
        min(fits.misfit) as best_misfit
    from fits
    group by fits.customer_id, fits.payer_id
),

best as (
    -- the best misfit, and whether a calendar with it explains a steady amount (then the unsteady ones,
    -- which fold a bonus into the calendar, do not compete)
    select
        fits.customer_id,
        fits.payer_id,
        lowest_misfit.best_misfit,
        bool_or(fits.is_steady) as best_is_steady
    from fits
    inner join lowest_misfit
        on
            lowest_misfit.customer_id = fits.customer_id
            and lowest_misfit.payer_id = fits.payer_id
            and lowest_misfit.best_misfit = fits.misfit
    group by fits.customer_id, fits.payer_id, lowest_misfit.best_misfit
),

rivals as (
    select
        ranked.customer_id,
        ranked.payer_id,
        count(distinct ranked.frequency) as frequency_count
    from ranked
    inner join best
        on
            best.customer_id = ranked.customer_id
            and best.payer_id = ranked.payer_id
            and best.best_misfit = ranked.misfit
            and best.best_is_steady = ranked.is_steady
    group by ranked.customer_id, ranked.payer_id
),

chosen as (
    select ranked.*
    from ranked
    where ranked.fit_rank = 1
),

classified as (
    select
        streams.*,
        chosen.pattern,
        chosen.pattern_param,
        chosen.frequency,
        chosen.periods_per_year,
        chosen.explained_count,
        chosen.extra_count,
        chosen.missed_runs,
        chosen.first_pay_date,
        chosen.last_pay_date,
        chosen.next_due_date,
        chosen.recent_amount,
        chosen.explained_amount,
        case
            when chosen.customer_id is null then 'unclassified'
            when rivals.frequency_count > 1 or not chosen.is_choosable then 'ambiguous'
            when abs(chosen.last_amount / chosen.recent_amount - 1) > $max_last_pay_change then 'unsettled'
            else 'classified'
        end as status,
        coalesce(chosen.same_day_bonus_amount, 0) as same_day_bonus_amount
    from streams
    left join chosen
        on chosen.customer_id = streams.customer_id and chosen.payer_id = streams.payer_id
    left join rivals
        on rivals.customer_id = streams.customer_id and rivals.payer_id = streams.payer_id
),

final as (
    select
        customer_id,
        payer_id,
        income_kind,
        case when is_coded then 'coded' else 'recurrence' end as found_by,
        status,
        case when status = 'classified' then pattern end as pattern,
        case when status = 'classified' then pattern_param end as pattern_param,
        case when status = 'classified' then frequency else 'irregular' end as pay_frequency,
        case when status = 'classified' then periods_per_year end as periods_per_year,
        payment_count,
        coalesce(explained_count, 0) as payments_used,
        coalesce(extra_count, payment_count) as extra_payment_count,
        coalesce(missed_runs, 0) as missed_runs,
        first_pay_date,
        last_pay_date,
        last_any_pay_date,
        next_due_date,
        coalesce(
            case
                -- not yet due; or a payment after the last explained one and at most early_pay_days before
                -- the next due day: that run paid early (December pay before the holidays)
                when status in ('classified', 'unsettled')
                    then
                        next_due_date + $due_grace_days > $window_end::date
                        or (
                            last_any_pay_date > last_pay_date
                            and last_any_pay_date >= next_due_date - $early_pay_days
                        )
                else last_any_pay_date >= $window_end::date - ($unexplained_current_days + $due_grace_days)
            end,
            false
        ) as is_current,
        case when status = 'classified' then recent_amount::double end as pay_amount,
        case
            when status = 'classified' then round(recent_amount::double * periods_per_year, 2)
        end as annual_salary,
        round(
            (total_paid - coalesce(explained_amount, 0) + same_day_bonus_amount)::double, 2
        ) as bonus_amount,
        total_paid::double as total_paid,
        case
            when status <> 'classified' then null
            when is_coded and missed_runs = 0 and extra_count = 0 and explained_count >= 3 then 'high'
            else 'medium'
        end as confidence
    from classified
)

select * from final
