-- The label gate's figures over this month's labels: customers, labelled, with current pay (labelled or
-- not), irregular or ambiguous, and the median labelled salary.
-- Grain: one row. Key: none (a single row).
-- Reads: features.customer_label.

select
    count(*)::bigint as customers,
    count(*) filter (where label_status = 'labelled')::bigint as labelled,
    count(*) filter (
        where label_status in ('labelled', 'irregular', 'ambiguous', 'unsettled')
    )::bigint as with_current_pay,
    count(*) filter (where label_status in ('irregular', 'ambiguous'))::bigint as irregular,
    median(annual_salary) filter (where label_status = 'labelled') as median_label
from features.customer_label
