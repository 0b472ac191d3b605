-- Every customer's features with the observed annual salary and pension (null when not paid here): the
-- frame the models are trained on and estimate.
-- Grain: one row per customer. Key: customer_id.
-- Reads: features.customer, features.customer_salary, features.customer_label.

select
    c.*,
    s.annual_salary,
    l.annual_pension
from features.customer as c
left join features.customer_salary as s on s.customer_id = c.customer_id
left join features.customer_label as l on l.customer_id = c.customer_id
order by c.customer_id
