-- The window's quarantined records by the rule they break (a record breaking two rules counts under
-- each), with the first one as an example: where, never what (the values stay in quarantine.ledger_lines).
-- Grain: one row per rule that quarantined a record of the window's loads. Key: rule.
-- Reads: quarantine.ledger_lines, ops.loads.
-- Parameters: $window.

with

findings as (
    select
        unnest(quarantined.failed_rules) as rule_name,
        quarantined.source_file,
        quarantined.source_line,
        quarantined.load_id
    from quarantine.ledger_lines as quarantined
),

final as (
    select
        -- `rule` is the name the report's template reads
        findings.rule_name as rule,  -- noqa: RF04
        count(*)::bigint as records,
        arg_min(
            parse_filename(findings.source_file) || ' line ' || findings.source_line, findings.source_line
        ) as example
    from findings
    inner join ops.loads as l on l.load_id = findings.load_id
    where l.period in (select unnest($window::varchar[]))
    group by findings.rule_name
)

select * from final
order by records desc, rule asc
