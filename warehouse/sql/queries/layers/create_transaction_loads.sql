-- The loads staging.transactions holds, with each one's quarantined count when it was staged: what the
-- monthly refresh compares with the accepted loads to choose between appending and rebuilding.
-- Grain: one row per load held in staging.transactions. Key: load_id.
-- Reads: none.
-- Writes: staging.transaction_loads.

create table if not exists staging.transaction_loads (
    load_id varchar primary key,
    loaded_at timestamp not null,
    quarantined bigint not null
)
