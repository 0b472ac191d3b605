-- published.income_bands_history (rows of one snapshot)
-- Grain: one row per customer in the run. Key: run_id, customer_id.
-- Reads: ml.predictions, ref.income_bands.
-- Parameters: $run_id, $period, $model_version, $published_at, $currency.
-- Every figure here was decided once, by ledgerband.tasks.modeling.amounts.published_figures, when the
-- run trained (band source, amount, band, rounded interval, band confidence; stored in ml.predictions):
-- this file only looks the band's name up and renames. Casts give the readers' types and change no value.

with

predictions as (
    select *
    from ml.predictions
    where run_id = $run_id
),

banded as (
    select
        predictions.customer_id,
        predictions.band_source,
        predictions.income_value,
        predictions.estimate_low,
        predictions.estimate_high,
        predictions.band_confidence,
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
        band_confidence::decimal(3, 2) as band_confidence,
        $model_version as model_version,
        $published_at::timestamp as published_at
    from banded
)

select * from final
