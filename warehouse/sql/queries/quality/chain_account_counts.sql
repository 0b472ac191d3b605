-- A load's accounts, and how many of them have a record quarantined for a broken balance chain (the
-- rule whose breaks are counted by account: quality.max_broken_chain_share).
-- Grain: one row. Key: none (a single row).
-- Reads: raw.ledger_lines, quarantine.ledger_lines.
-- Parameters: $load_id, $chain_rule.

select
    count(distinct r.account_id) as account_count,
    count(distinct r.account_id) filter (where q.source_line is not null) as broken_chain_account_count
from raw.ledger_lines as r
left join quarantine.ledger_lines as q
    on
        q.load_id = r.load_id
        and q.source_line = r.source_line
        and list_contains(q.failed_rules, $chain_rule)
where r.load_id = $load_id
