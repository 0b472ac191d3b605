-- How many of a load's records were quarantined while the file was read, by ingest rule (such a record
-- has that one rule).
-- Grain: one row per ingest rule that quarantined a record of the load. Key: rule_name.
-- Reads: quarantine.ledger_lines.
-- Parameters: $load_id, $ingest_rules.

select
    failed_rules[1] as rule_name,
    count(*) as records
from quarantine.ledger_lines
where
    load_id = $load_id
    and len(failed_rules) = 1
    and list_contains($ingest_rules, failed_rules[1])
group by 1
