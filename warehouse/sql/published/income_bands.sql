-- published.income_bands_history (rows of one snapshot)
-- Grain: one row per customer in the run. Key: run_id, customer_id.
-- Reads: ml.predictions, ref.income_bands.
-- Parameters: $run_id, $period, $model_version, $published_at.
-- Observed salary wins over the model: a customer paid here is banded on what they are paid.

with

predictions as (
    select *
    from ml.predictions
    where run_id = $run_id
),

valued as (
    select
        customer_id,
        -- Rounded before banding, so the published amount and its band always agree.
        round(coalesce(annual_salary, estimate), 2) as annual_income_estimate,
        case when annual_salary is not null then 'observed_salary' else 'model_estimate' end as band_source
    from predictions
),

banded as (
    select valued.*, bands.income_band
    from valued
    inner join ref.income_bands as bands
        on (bands.lower_bound is null or valued.annual_income_estimate >= bands.lower_bound)
        and (bands.upper_bound is null or valued.annual_income_estimate < bands.upper_bound)
),

final as (
    select
        $run_id as run_id,
        $period as period,
        customer_id,
        income_band,
        band_source,
        annual_income_estimate::decimal(18, 2) as annual_income_estimate,
        $model_version as model_version,
        $published_at::timestamp as published_at
    from banded
)

select * from final
