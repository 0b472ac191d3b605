-- Salary-coded pay credits by month of the salary window: the label gate compares the run's month with
-- the earlier ones to catch a sender's coding change directly.
-- Grain: one row per month with such credits. Key: month_start.
-- Reads: intermediate.payroll_credits.

select
    date_trunc('month', booking_date)::date as month_start,
    count(*)::bigint as credits
from intermediate.payroll_credits
where is_coded and income_kind = 'salary'
group by all
