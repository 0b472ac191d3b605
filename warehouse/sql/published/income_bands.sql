-- published.income_bands_history (rows of one snapshot)
-- Grain: one row per customer in the run. Key: run_id, customer_id.
-- Reads: ml.predictions, ref.income_bands.
-- Parameters: $run_id, $period, $model_version, $published_at, $currency.
-- Observed salary wins over the model, then an observed pension: a customer paid here is banded on what
-- they are paid. The amount (observed: to cents; estimated: to intervals.round_to) and its band were set
-- together by ledgerband.tasks.modeling.bands when the run trained, so the published amount and its band always
-- agree; this file only looks the band up. A model estimate carries its conformal interval (rounded
-- outwards) and band confidence (share of the interval inside its band); observed amounts carry none.

with

predictions as (
    select *
    from ml.predictions
    where run_id = $run_id
),

banded as (
    select
        predictions.customer_id,
        predictions.income_value,
        predictions.estimate_low,
        predictions.estimate_high,
        predictions.band_confidence,
        case
            when predictions.annual_salary is not null then 'observed_salary'
            when predictions.observed_pension is not null then 'observed_pension'
            else 'model_estimate'
        end as band_source,
        bands.income_band
    from predictions
    inner join ref.income_bands as bands on bands.band_index = predictions.band_index
),

final as (
    select
        $run_id as run_id,
        $period as period,
        customer_id,
        income_band,
        band_source,
        income_value::decimal(18, 2) as annual_income_estimate,
        $currency as currency,
        estimate_low::decimal(18, 2) as estimate_low,
        estimate_high::decimal(18, 2) as estimate_high,
        round(band_confidence, 2)::decimal(3, 2) as band_confidence,
        $model_version as model_version,
        $published_at::timestamp as published_at
    from banded
)

select * from final
