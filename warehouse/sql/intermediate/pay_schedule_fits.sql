-- intermediate.pay_schedule_fits
-- Grain: one row per (customer_id, payer_id, pattern, pattern_param): a pay calendar that explains at
-- least two of a stream's payments one to one. Key: those four.
-- Reads: intermediate.payroll_credits, intermediate.pay_calendar_matches, intermediate.pay_calendars,
-- ref.business_calendar, ref.pay_frequencies.
-- Scope: per customer (built per bucket of customers).
-- Parameters: $max_missed_runs, $explained_per_left_over, $same_day_bonus_multiple, $steady_pay_peak,
-- $semi_monthly_halves_ratio.
-- A pay calendar names the nominal pay days; pay due on a weekend or holiday lands on the business day
-- before or after it (ref.business_calendar), the same way every time for one employer. Calendars tried,
-- each with every parameter the payments allow:
--   monthly_day      day D of the month, 1..31 (past the month's end: its last day; D = 31 with pay moved
--                    back is "the last business day")
--   monthly_weekday  the N-th (1..4) or last given weekday of the month ("1-5" first Friday, "last-4")
--   semi_monthly     two days a month, D1 and D2, 13 to 17 days apart ("1+15", "15+31")
--   every_7/14/28    the same weekday every 7, 14 or 28 days (param: days since 2000-01-03 modulo k)
-- A fit says how many payments the calendar explains, how many it leaves over (extras: bonuses, other
-- one-offs), how many of its pay days between the first and the last explained payment had no payment
-- (missed runs), and when the next payment falls due.

with

credits as (
    select * from intermediate.payroll_credits
),

frequencies as (
    select * from ref.pay_frequencies
),

ranked as (
    -- only the calendars that could fit the stream: intermediate.pay_calendar_matches keeps no other
    select * from intermediate.pay_calendar_matches
),

schedule as (
    select distinct
        pay_calendars.pattern,
        pay_calendars.pattern_param,
        pay_calendars.slot,
        pay_calendars.nominal_day
    from intermediate.pay_calendars
),

calendar as (
    select * from ref.business_calendar
),

stream_sizes as (
    select
        credits.customer_id,
        credits.payer_id,
        count(*)::bigint as payment_count
    from credits
    group by credits.customer_id, credits.payer_id
),

fits as (
    select
        ranked.customer_id,
        ranked.payer_id,
        ranked.pattern,
        ranked.pattern_param,
        any_value(ranked.frequency) as frequency,
        count(distinct ranked.booking_date)::bigint as explained_count,
        count(distinct ranked.slot)::bigint as slot_count,
        count(*)::bigint as match_count,
        count(*) filter (where ranked.moved <> 0)::bigint as moved_count,
        -- an employer moves pay one way: back to the business day before, or forward to the one after
        count(distinct ranked.moved) filter (where ranked.moved <> 0) as move_directions,
        max(ranked.moved) filter (where ranked.moved <> 0) as move_direction,
        min(ranked.amount) as lowest_amount,
        max(ranked.amount) as highest_amount,
        min(ranked.slot) as first_slot,
        max(ranked.slot) as last_slot,
        min(ranked.booking_date) as first_pay_date,
        max(ranked.booking_date) as last_pay_date,
        sum(ranked.amount) as explained_amount,
        max(ranked.amount) / nullif(median(ranked.amount), 0) as amount_peak,
        median(ranked.amount) filter (where ranked.recency <= 3) as recent_amount,
        max(ranked.amount) filter (where ranked.recency = 1) as last_amount
    from ranked
    group by ranked.customer_id, ranked.payer_id, ranked.pattern, ranked.pattern_param
),

excess as (
    -- an explained payment over payroll.same_day_bonus_multiple times the pay amount carries a bonus
    -- paid on the pay day: the part above the pay amount
    select
        ranked.customer_id,
        ranked.payer_id,
        ranked.pattern,
        ranked.pattern_param,
        coalesce(
            sum(ranked.amount - fits.recent_amount)
            filter (where ranked.amount > $same_day_bonus_multiple * fits.recent_amount),
            0
        ) as same_day_bonus_amount
    from ranked
    inner join fits
        on
            fits.customer_id = ranked.customer_id
            and fits.payer_id = ranked.payer_id
            and fits.pattern = ranked.pattern
            and fits.pattern_param = ranked.pattern_param
    group by ranked.customer_id, ranked.payer_id, ranked.pattern, ranked.pattern_param
),

one_to_one as (
    select
        fits.*,
        excess.same_day_bonus_amount,
        stream_sizes.payment_count - fits.explained_count as extra_count,
        fits.last_slot - fits.first_slot + 1 - fits.slot_count as missed_runs
    from fits
    inner join stream_sizes
        on stream_sizes.customer_id = fits.customer_id and stream_sizes.payer_id = fits.payer_id
    inner join excess
        on
            excess.customer_id = fits.customer_id
            and excess.payer_id = fits.payer_id
            and excess.pattern = fits.pattern
            and excess.pattern_param = fits.pattern_param
    -- every explained payment in one slot, every slot paid once, at least one gap to go by
    where
        fits.match_count = fits.explained_count
        and fits.slot_count = fits.explained_count
        and fits.explained_count >= 2
        and fits.move_directions <= 1
),

next_due as (
    select
        one_to_one.customer_id,
        one_to_one.payer_id,
        one_to_one.pattern,
        one_to_one.pattern_param,
        -- the next nominal pay day, moved the way this payer moves pay (forward when it never showed)
        min(
            case
                when one_to_one.move_direction = -1 then calendar.prev_business_day
                else calendar.next_business_day
            end
        ) as next_due_date
    from one_to_one
    inner join schedule
        on
            schedule.pattern = one_to_one.pattern
            and schedule.pattern_param = one_to_one.pattern_param
            and schedule.slot = one_to_one.last_slot + 1
    inner join calendar on calendar.day = schedule.nominal_day
    group by one_to_one.customer_id, one_to_one.payer_id, one_to_one.pattern, one_to_one.pattern_param
),

final as (
    select
        one_to_one.customer_id,
        one_to_one.payer_id,
        one_to_one.pattern,
        one_to_one.pattern_param,
        one_to_one.frequency,
        frequencies.periods_per_year,
        one_to_one.explained_count,
        one_to_one.extra_count,
        one_to_one.missed_runs,
        one_to_one.moved_count,
        one_to_one.first_pay_date,
        one_to_one.last_pay_date,
        next_due.next_due_date,
        one_to_one.explained_amount,
        one_to_one.recent_amount,
        one_to_one.last_amount,
        one_to_one.same_day_bonus_amount,
        -- no explained payment more than 25% above the median: pay, rather than a bonus folded into the
        -- calendar (a payment below is the old level before a rise, which is no sign either way)
        coalesce(one_to_one.amount_peak <= $steady_pay_peak, false) as is_steady,
        -- Four-weekly pay is told from monthly pay only by three gaps that a monthly calendar cannot
        -- explain; with fewer, the fit still competes (and makes the stream ambiguous) but is not chosen.
        -- Two payments a month of different sizes (a salary and an allowance, two employers without a payer
        -- id) are not semi-monthly pay: its halves are the same pay.
        (one_to_one.frequency <> 'four_weekly' or one_to_one.explained_count >= 4)
        and (
            one_to_one.frequency <> 'semi_monthly'
            or one_to_one.highest_amount <= $semi_monthly_halves_ratio * one_to_one.lowest_amount
        ) as is_choosable
    from one_to_one
    inner join frequencies on frequencies.frequency = one_to_one.frequency
    left join next_due
        on
            next_due.customer_id = one_to_one.customer_id
            and next_due.payer_id = one_to_one.payer_id
            and next_due.pattern = one_to_one.pattern
            and next_due.pattern_param = one_to_one.pattern_param
    -- bonuses and one-offs are a minority of a stream's payments; a calendar that misses more than the
    -- allowed pay runs is not the stream's calendar
    where
        one_to_one.missed_runs <= $max_missed_runs
        and one_to_one.extra_count <= one_to_one.explained_count // $explained_per_left_over
)

select * from final
