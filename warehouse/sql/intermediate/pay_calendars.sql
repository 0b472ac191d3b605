-- intermediate.pay_calendars
-- Grain: one row per (pattern, pattern_param, slot, pay_day): a nominal pay day of a pay calendar and a
-- day its pay can land on. Key: those four.
-- Reads: ref.business_calendar.
-- The catalogue of pay calendars intermediate.pay_schedule_fits tries (see there), over the business
-- calendar's days: pay due on a business day lands on it; pay due on a weekend or holiday lands on the
-- business day before (moved = -1) or after (moved = 1) it.

with

calendar as (
    select * from ref.business_calendar
),

landing as (
    -- Where pay due on a day lands: that day when it is a business day, else the business day before it
    -- (moved back) or after it (moved forward).
    select
        calendar.day as nominal_day,
        calendar.prev_business_day as pay_day,
        case when calendar.is_business_day then 0 else -1 end as moved
    from calendar
    union
    select
        calendar.day as nominal_day,
        calendar.next_business_day as pay_day,
        case when calendar.is_business_day then 0 else 1 end as moved
    from calendar
),

month_day_params as (
    select unnest(range(1, 32)) as day_param
),

monthly_day as (
    select
        'monthly_day' as pattern,
        month_day_params.day_param::varchar as pattern_param,
        'monthly' as frequency,
        calendar.month_index as slot,
        calendar.day as nominal_day
    from calendar
    inner join month_day_params
        on calendar.day_of_month = least(month_day_params.day_param, calendar.days_in_month)
),

monthly_weekday as (
    select
        'monthly_weekday' as pattern,
        ((calendar.day_of_month - 1) // 7 + 1)::varchar || '-' || calendar.iso_weekday::varchar
            as pattern_param,
        'monthly' as frequency,
        calendar.month_index as slot,
        calendar.day as nominal_day
    from calendar
    where calendar.day_of_month <= 28
    union all
    select
        'monthly_weekday' as pattern,
        'last-' || calendar.iso_weekday::varchar as pattern_param,
        'monthly' as frequency,
        calendar.month_index as slot,
        calendar.day as nominal_day
    from calendar
    where calendar.day_of_month + 7 > calendar.days_in_month
),

semi_monthly_params as (
    select
        first_day.day_param as first_day,
        second_day.day_param as second_day
    from month_day_params as first_day
    inner join month_day_params as second_day
        on second_day.day_param - first_day.day_param between 13 and 17
),

semi_monthly as (
    select
        'semi_monthly' as pattern,
        semi_monthly_params.first_day::varchar || '+' || semi_monthly_params.second_day::varchar
            as pattern_param,
        'semi_monthly' as frequency,
        calendar.month_index * 2
        + case
            when calendar.day_of_month = least(semi_monthly_params.first_day, calendar.days_in_month) then 0
            else 1
        end as slot,
        calendar.day as nominal_day
    from calendar
    inner join semi_monthly_params
        on
            calendar.day_of_month = least(semi_monthly_params.first_day, calendar.days_in_month)
            or calendar.day_of_month = least(semi_monthly_params.second_day, calendar.days_in_month)
),

cycle_lengths as (
    select
        cycles.cycle_days,
        cycles.frequency
    from (values (7, 'weekly'), (14, 'fortnightly'), (28, 'four_weekly')) as cycles (cycle_days, frequency)
),

every_k_days as (
    select
        'every_' || cycle_lengths.cycle_days::varchar as pattern,
        ((calendar.day - date '2000-01-03') % cycle_lengths.cycle_days)::varchar as pattern_param,
        cycle_lengths.frequency,
        (calendar.day - date '2000-01-03') // cycle_lengths.cycle_days as slot,
        calendar.day as nominal_day
    from calendar
    cross join cycle_lengths
),

schedule as (
    select * from monthly_day
    union all
    select * from monthly_weekday
    union all
    select * from semi_monthly
    union all
    select * from every_k_days
),

final as (
    select
        schedule.pattern,
        schedule.pattern_param,
        schedule.frequency,
        schedule.slot,
        schedule.nominal_day,
        landing.pay_day,
        landing.moved
    from schedule
    inner join landing on landing.nominal_day = schedule.nominal_day
)

select * from final
