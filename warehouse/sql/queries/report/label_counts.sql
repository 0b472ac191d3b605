-- This month's salary labels by status and confidence, with the bonuses found: the report's label table.
-- Grain: one row per label status and confidence. Key: label_status, confidence.
-- Reads: features.customer_label.

select
    label_status,
    coalesce(label_confidence, '–') as confidence,
    count(*)::bigint as customers,
    sum(bonus_amount)::double as bonus_amount
from features.customer_label
group by all
order by all
