-- Removes what an earlier validation of the load found, before this one writes its findings: rerunning
-- validation replaces them. Records quarantined while the file was read (their one rule an ingest rule,
-- tasks/ingest/records.py INGEST_RULES) stay.
-- Grain: one deleted row per record of the load with a rule finding. Key: load_id, source_line.
-- Reads: quarantine.ledger_lines.
-- Writes: quarantine.ledger_lines.
-- Parameters: $load_id, $ingest_rules.

delete from quarantine.ledger_lines
where
    load_id = $load_id
    and not (len(failed_rules) = 1 and list_contains($ingest_rules, failed_rules[1]))
