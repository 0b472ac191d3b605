-- Every income band of the scheme with the run's published customers in it, by how they were banded
-- (observed pay or pension, or the model's estimate); bands nobody fell in show zeros.
-- Grain: one row per income band. Key: band_index.
-- Reads: ref.income_bands, published.income_bands_history.
-- Parameters: $run_id.

select
    b.band_index,
    b.income_band,
    b.band_label,
    count(h.customer_id) filter (where h.band_source like 'observed%') as observed,
    count(h.customer_id) filter (where h.band_source = 'model_estimate') as estimated,
    count(h.customer_id) as customers
from ref.income_bands as b
left join published.income_bands_history as h on h.income_band = b.income_band and h.run_id = $run_id
group by all
order by b.band_index
