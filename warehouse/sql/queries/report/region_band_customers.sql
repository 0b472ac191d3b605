-- The run's published customers by home region and income band (exact counts, as stored before
-- suppression for readers): the report's region table and its band-shares figure.
-- Grain: one row per home region and income band with customers. Key: home_region, income_band.
-- Reads: published.band_summary_history.
-- Parameters: $run_id.

select
    home_region,
    income_band,
    sum(customer_count)::bigint as customers
from published.band_summary_history
where run_id = $run_id
group by all
order by home_region, income_band
