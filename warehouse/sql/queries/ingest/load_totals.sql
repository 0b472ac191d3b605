-- A ledger load's control totals as the pipeline reads them, for the manifest reconciliation: the sums of
-- its readable amounts by direction, and how many records cannot be summed. Read through the one parse
-- of the text fields (staging.ledger_lines_parsed).
-- Grain: one row. Key: none (a single row).
-- Reads: staging.ledger_lines_parsed.
-- Parameters: $load_id.

select
    coalesce(sum(amount_value) filter (where direction = 'CRDT'), 0) as credit_total,
    coalesce(sum(amount_value) filter (where direction = 'DBIT'), 0) as debit_total,
    count(*) filter (
        where amount_value is null or direction is null or direction not in ('CRDT', 'DBIT')
    ) as unreadable
from staging.ledger_lines_parsed
where load_id = $load_id
