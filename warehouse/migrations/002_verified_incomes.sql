-- Migration 2 (2026-12-05): the optional verified incomes file. Three new tables: raw.verified_incomes
-- (the file as received), quarantine.verified_incomes (records a run set aside, by rule) and
-- ops.verified_income_runs (which file each run read, with its counts). No existing table changes.
-- schema.sql declares them whole and creates them in any warehouse before migrations run; the statements
-- here are the same declarations, so this migration is complete on its own and harmless after it.
-- Runs inside one transaction with its row in ops.schema_migrations (ledgerband.tasks.core.warehouse).

create table if not exists raw.verified_incomes (
    load_id varchar not null,
    source_file varchar not null,
    source_line bigint not null,
    customer_id varchar,
    verified_on varchar,
    annual_net_income varchar,
    currency varchar,
    source varchar
);

create table if not exists quarantine.verified_incomes (
    run_id varchar not null,
    load_id varchar not null,
    source_file varchar not null,
    source_line bigint not null,
    failed_rules varchar[] not null,
    reason varchar not null,
    quarantined_at timestamp not null
);

create table if not exists ops.verified_income_runs (
    run_id varchar primary key,
    period varchar not null,
    load_id varchar,
    source_file varchar,
    rows_in_file bigint not null,
    rows_accepted bigint,
    rows_quarantined bigint,
    checked_at timestamp
);
