-- A run's estimates with what was observed, for the demo's truth check against the generator's answers.
-- Grain: one row per customer the run estimated. Key: customer_id.
-- Reads: ml.predictions.
-- Parameters: $run_id.

select
    customer_id,
    estimate,
    estimate_low,
    estimate_high,
    annual_salary,
    observed_pension
from ml.predictions
where run_id = $run_id
