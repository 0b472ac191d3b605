-- One ledger load's records as received, with the helper columns the suite's rules read (their meaning is
-- in expectations/ledger_lines.json, meta.derived_columns). tasks/quality/validate.py reads it in chunks
-- for GX; tasks/quality/pushdown.py wraps it with the predicates it generates from the suite.
-- Grain: one row per record of the load that could be split into fields. Key: source_line.
-- Reads: ops.loads, raw.ledger_lines, ops.accepted_txn_ids, quarantine.ledger_lines,
-- staging.customer_reference, staging.ledger_lines_parsed, and code_lists (the code lists the caller
-- registers from tasks/quality/codelists.py).
-- Parameters: $load_id, $max_field_length.
-- The received fields are named here in the extract contract's order (ingest/extract_contract.py,
-- LEDGER_COLUMNS); the text-hygiene helpers name the first field, in that order, that breaks them
-- (tests/sql/test_ledger_checks.py holds both to the contract).
-- - txn_id_loaded_before: the txn_id came in an earlier file that was accepted, or was validated earlier
--   in the same run, and was not quarantined there (accepted files through ops.accepted_txn_ids, kept by
--   tasks/quality/accepted_txn_ids.py);
-- - customer_in_reference: the customer_id is in the current customer reference file;
-- - balance_chain_broken: the account's balances do not chain in this extract. Each posting's balance
--   before it (balance_after minus the signed amount) must be a balance the account reached: after
--   another of its postings in this extract, or in the previous month's extract. A chain has one start
--   (its opening balance, unknown) when the account has no postings the month before, none otherwise;
--   more starts mean a posting is missing (or was altered). The test is set-based (one hash anti-join
--   and one aggregate) and needs no posting order within a day, which extracts do not promise.

with

this_load as (
    select
        loads.loaded_at,
        loads.run_id,
        loads.period
    from ops.loads as loads
    where loads.load_id = $load_id
),

earlier_loads as (
    select
        l.load_id,
        l.period,
        l.status
    from ops.loads as l
    cross join this_load as t
    where
        l.dataset = 'ledger' and l.load_id <> $load_id
        and (
            l.status = 'accepted'
            -- a file validated earlier in this same run; a 'loaded' file left by a run that stopped
            -- or crashed is not evidence of anything
            or (l.status = 'loaded' and l.run_id = t.run_id and l.loaded_at < t.loaded_at)
        )
),

this_txn_ids as (
    select received.txn_id
    from raw.ledger_lines as received
    where received.load_id = $load_id
),

previous as (
    -- accepted loads: their keys (ops.accepted_txn_ids, brought in line with ops.loads just before)
    select k.txn_id
    from ops.accepted_txn_ids as k
    where k.load_id <> $load_id and k.txn_id in (select this_txn_ids.txn_id from this_txn_ids)
    union
    -- files validated earlier in this same run, not yet accepted
    select r.txn_id
    from raw.ledger_lines as r
    inner join earlier_loads as l on l.load_id = r.load_id
    anti join quarantine.ledger_lines as q on q.load_id = r.load_id and q.source_line = r.source_line
    where l.status = 'loaded' and r.txn_id in (select this_txn_ids.txn_id from this_txn_ids)
),

reference as (
    select distinct customers.customer_id
    from staging.customer_reference as customers
),

postings as (
    select
        parsed.account_id,
        parsed.source_line,
        parsed.balance_after_value,
        -- only a posting whose amount reads back exactly as written (positive, two places) and that
        -- was not loaded before can start a chain: a garbled amount or a booking sent again is its own
        -- rule's finding, not a missing posting
        case
            when
                parsed.amount_value > 0 and parsed.amount_value::varchar = parsed.amount
                and previous.txn_id is null
                then
                    parsed.balance_after_value
                    - case parsed.direction
                        when 'CRDT' then parsed.amount_value when 'DBIT' then -parsed.amount_value
                    end
        end as balance_before
    from staging.ledger_lines_parsed as parsed
    left join previous on previous.txn_id = parsed.txn_id
    where parsed.load_id = $load_id and parsed.account_id is not null
),

month_before as (
    select max(earlier_loads.period) as period
    from earlier_loads
    where earlier_loads.period < (select this_load.period from this_load)
),

reached as (
    select
        postings.account_id,
        postings.balance_after_value as balance,
        postings.source_line
    from postings
    union all
    select
        p.account_id,
        p.balance_after_value,
        null as source_line
    from staging.ledger_lines_parsed as p
    inner join earlier_loads as l on l.load_id = p.load_id
    where
        l.period = (select month_before.period from month_before)
        and p.account_id in (select postings.account_id from postings)
),

chain_starts as (
    select
        postings.account_id,
        count(*) filter (where postings.balance_before is not null) as start_count
    from postings
    anti join reached
        on
            reached.account_id = postings.account_id
            and reached.balance = postings.balance_before
            and reached.source_line is distinct from postings.source_line
    group by postings.account_id
),

continued as (
    select distinct reached.account_id
    from reached
    where reached.source_line is null
),

broken_chains as (
    select chain_starts.account_id
    from chain_starts
    left join continued on continued.account_id = chain_starts.account_id
    where chain_starts.start_count > case when continued.account_id is null then 1 else 0 end
),

final as (
    select
        cur.source_line,
        cur.txn_id,
        cur.account_id,
        cur.customer_id,
        cur.booking_date,
        cur.amount,
        cur.direction,
        cur.currency,
        cur.balance_after,
        cur.bank_txn_code,
        cur.purpose_code,
        cur.counterparty_id,
        cur.merchant_category,
        cur.merchant_region,
        cur.amount_value::double as amount_value,
        cur.booking_date_value,
        previous.txn_id is not null as txn_id_loaded_before,
        cur.customer_id is null or reference.customer_id is not null as customer_in_reference,
        broken_chains.account_id is not null as balance_chain_broken,
        cur.bank_txn_code is null
        or cur.btc_domain in (
            select code_lists.code
            from code_lists
            where code_lists.list = 'btc_domains'
        ) as btc_domain_listed,
        cur.bank_txn_code is null
        or cur.btc_domain || '/' || cur.btc_family in (
            select code_lists.code
            from code_lists
            where code_lists.list = 'btc_domain_families'
        ) as btc_domain_family_listed,
        cur.bank_txn_code is null
        or cur.btc_subfamily in (
            select code_lists.code
            from code_lists
            where code_lists.list = 'btc_subfamilies'
        ) as btc_subfamily_listed,
        cur.purpose_code is null
        or cur.purpose_code in (
            select code_lists.code
            from code_lists
            where code_lists.list = 'purpose_codes'
        ) as purpose_code_listed,
        cur.merchant_category is null
        or cur.merchant_category in (
            select code_lists.code
            from code_lists
            where code_lists.list = 'merchant_categories'
        ) as merchant_category_listed,
        case
            when regexp_matches(cur.txn_id, '[\x00-\x1f\x7f]') then 'txn_id'
            when regexp_matches(cur.account_id, '[\x00-\x1f\x7f]') then 'account_id'
            when regexp_matches(cur.customer_id, '[\x00-\x1f\x7f]') then 'customer_id'
            when regexp_matches(cur.booking_date, '[\x00-\x1f\x7f]') then 'booking_date'
            when regexp_matches(cur.amount, '[\x00-\x1f\x7f]') then 'amount'
            when regexp_matches(cur.direction, '[\x00-\x1f\x7f]') then 'direction'
            when regexp_matches(cur.currency, '[\x00-\x1f\x7f]') then 'currency'
            when regexp_matches(cur.balance_after, '[\x00-\x1f\x7f]') then 'balance_after'
            when regexp_matches(cur.bank_txn_code, '[\x00-\x1f\x7f]') then 'bank_txn_code'
            when regexp_matches(cur.purpose_code, '[\x00-\x1f\x7f]') then 'purpose_code'
            when regexp_matches(cur.counterparty_id, '[\x00-\x1f\x7f]') then 'counterparty_id'
            when regexp_matches(cur.merchant_category, '[\x00-\x1f\x7f]') then 'merchant_category'
            when regexp_matches(cur.merchant_region, '[\x00-\x1f\x7f]') then 'merchant_region'
        end as field_with_control_character,
        case
            when length(cur.txn_id) > $max_field_length then 'txn_id'
            when length(cur.account_id) > $max_field_length then 'account_id'
            when length(cur.customer_id) > $max_field_length then 'customer_id'
            when length(cur.booking_date) > $max_field_length then 'booking_date'
            when length(cur.amount) > $max_field_length then 'amount'
            when length(cur.direction) > $max_field_length then 'direction'
            when length(cur.currency) > $max_field_length then 'currency'
            when length(cur.balance_after) > $max_field_length then 'balance_after'
            when length(cur.bank_txn_code) > $max_field_length then 'bank_txn_code'
            when length(cur.purpose_code) > $max_field_length then 'purpose_code'
            when length(cur.counterparty_id) > $max_field_length then 'counterparty_id'
            when length(cur.merchant_category) > $max_field_length then 'merchant_category'
            when length(cur.merchant_region) > $max_field_length then 'merchant_region'
        end as field_too_long
    from staging.ledger_lines_parsed as cur
    left join previous on previous.txn_id = cur.txn_id
    left join reference on reference.customer_id = cur.customer_id
    left join broken_chains on broken_chains.account_id = cur.account_id
    where cur.load_id = $load_id
)

select * from final
order by source_line
