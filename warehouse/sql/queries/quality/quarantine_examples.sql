-- The first quarantined records of a load as 'line N: rule, rule': where and which rules, never the
-- values (these lines reach gate decisions, alerts and readers).
-- Grain: one row per quarantined record, the first $examples by line. Key: example.
-- Reads: quarantine.ledger_lines.
-- Parameters: $load_id, $examples.

select 'line ' || source_line || ': ' || array_to_string(failed_rules, ', ') as example
from quarantine.ledger_lines
where load_id = $load_id
order by source_line
limit $examples
