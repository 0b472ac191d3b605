-- Writes validation's findings: the records that break a row-level rule, with their rules and reason
-- (the fields stay in raw.ledger_lines; raw_record is null).
-- Grain: one written row per quarantined record. Key: load_id, source_line.
-- Reads: quarantine_rows (the findings frame the caller registers).
-- Writes: quarantine.ledger_lines.

insert into quarantine.ledger_lines
select
    quarantine_rows.load_id,
    quarantine_rows.source_file,
    quarantine_rows.source_line,
    quarantine_rows.failed_rules::varchar[] as failed_rules,
    quarantine_rows.reason,
    quarantine_rows.raw_record::varchar as raw_record,
    quarantine_rows.quarantined_at
from quarantine_rows
