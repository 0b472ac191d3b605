-- The run's published customers by income band and how they were banded (observed salary, observed
-- pension, model estimate); a band nobody fell in shows one row with no source and zero.
-- Grain: one row per income band and band source. Key: income_band, band_source.
-- Reads: ref.income_bands, published.income_bands_history.
-- Parameters: $run_id.

select
    b.income_band,
    h.band_source,
    count(h.customer_id) as customers
from ref.income_bands as b
left join published.income_bands_history as h on h.income_band = b.income_band and h.run_id = $run_id
group by all
order by all
