-- features.customer_salary
-- Grain: one row per customer with a salary label (the model's target). Key: customer_id.
-- Reads: features.customer_label.
-- Scope: per customer (built per bucket of customers).
-- The labelled customers of features.customer_label, with what the model learns from: annual net pay
-- received here (after tax and deductions, excluding bonuses).

with

labels as (
    select * from features.customer_label
),

final as (
    select
        labels.customer_id,
        labels.annual_salary,
        labels.stream_count,
        labels.main_pay_frequency,
        labels.label_confidence
    from labels
    where labels.label_status = 'labelled'
)

select * from final
