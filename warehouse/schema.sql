-- ledgerband warehouse schema: every table that outlives a run, in its final form. Idempotent: applied at
-- the start of every run. Layers are schemas: raw -> staging -> intermediate -> features -> published,
-- plus quarantine, ml, ops and ref. Tables and views built wholesale by a layer's SQL file (staging.*,
-- intermediate.*, features.*) are created by that file.
-- A warehouse written by an earlier version is brought to this form by warehouse/migrations/ (applied in
-- order, each once, recorded in ops.schema_migrations; see ledgerband.tasks.core.warehouse.apply_schema).
-- Change a table here AND add a migration for warehouses that exist; tests/sql/test_schema_migration.py
-- holds the two equal.

create schema if not exists raw;
create schema if not exists staging;
create schema if not exists intermediate;
create schema if not exists quarantine;
create schema if not exists features;
create schema if not exists ml;
create schema if not exists published;
create schema if not exists ops;
create schema if not exists ref;

-- One row per file the pipeline was handed (ledger extract or customer reference file).
create table if not exists ops.loads (
    load_id varchar primary key,
    dataset varchar not null,              -- 'ledger', 'customers' or 'verified_incomes'
    period varchar,                        -- YYYY-MM for ledger extracts
    source_file varchar not null,
    sha256 varchar not null,
    manifest_row_count bigint,
    rows_in_file bigint,                   -- data records read from the file (loaded + malformed)
    rows_loaded bigint,                    -- records that reached raw.*
    rows_quarantined bigint,               -- malformed records + records breaking a row-level rule
    credit_total decimal(18, 2),
    debit_total decimal(18, 2),
    status varchar not null,               -- 'loaded' -> 'accepted' | 'rejected'; 'accepted' -> 'restated'
    reason varchar,
    run_id varchar,
    loaded_at timestamp not null,
    decided_at timestamp,
    last_seen_at timestamp                 -- last handed to a run (a file sent again: skipped, but latest)
);

-- The migrations (warehouse/migrations/NNN_name.sql) this warehouse has had.
create table if not exists ops.schema_migrations (
    version integer primary key,
    name varchar not null,
    applied_at timestamp not null
);

-- Ledger records exactly as received (text), with lineage. Grain: one row per data record of a file.
create table if not exists raw.ledger_lines (
    load_id varchar not null,
    source_file varchar not null,
    source_line bigint not null,           -- line number in the file, header = line 1
    txn_id varchar,
    account_id varchar,
    customer_id varchar,
    booking_date varchar,
    amount varchar,
    direction varchar,
    currency varchar,
    balance_after varchar,
    bank_txn_code varchar,
    purpose_code varchar,
    counterparty_id varchar,
    merchant_category varchar,
    merchant_region varchar
);

create table if not exists raw.customers (
    load_id varchar not null,
    source_file varchar not null,
    source_line bigint not null,
    customer_id varchar,
    birth_date varchar,
    sex varchar,
    home_region varchar,
    opened_date varchar
);

-- The optional verified incomes file (verified_incomes.csv) exactly as received (text), with lineage.
-- Personal data: incomes documented in credit applications; read by staging.verified_incomes only, never
-- published. Grain: one row per data record of a file.
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

-- Verified income records a run set aside, each with the rules it broke (tasks/quality/verified.py). The
-- rules depend on the run's period (a verification can be in the future or out of date), so every run
-- judges the file it read again. Grain: one row per (run_id, load_id, source_line). The reason names the
-- rules and fields, never a value: the values stay in raw.verified_incomes.
create table if not exists quarantine.verified_incomes (
    run_id varchar not null,
    load_id varchar not null,
    source_file varchar not null,
    source_line bigint not null,
    failed_rules varchar[] not null,
    reason varchar not null,
    quarantined_at timestamp not null
);

-- One row per run: the verified incomes file it read (load_id null: none in the landing folder) and its
-- counts; rows_in_file = rows_accepted + rows_quarantined once checked_at is set.
create table if not exists ops.verified_income_runs (
    run_id varchar primary key,
    period varchar not null,
    load_id varchar,
    source_file varchar,
    rows_in_file bigint not null,
    rows_accepted bigint,
    rows_quarantined bigint,
    checked_at timestamp                   -- the suite ran on it for this run: staging reads it only then
);

-- Records kept out of staging, each with the rules it broke. Grain: one row per (load_id, source_line).
-- Rule failures keep their fields in raw.ledger_lines (same load_id, source_line); records that could
-- not be split into fields at all keep their text in raw_record.
create table if not exists quarantine.ledger_lines (
    load_id varchar not null,
    source_file varchar not null,
    source_line bigint not null,
    failed_rules varchar[] not null,
    reason varchar not null,
    raw_record varchar,
    quarantined_at timestamp not null
);

-- The txn_ids the repeated-booking rule (txn_id_not_loaded_before) compares a new extract with: every record
-- of an accepted ledger load that was not quarantined. Narrow, so the check reads two columns instead of
-- raw.ledger_lines joined to ops.loads and the quarantine. Kept by tasks/quality/accepted_txn_ids.py, which
-- records each held load with its quarantined count and brings the table in line with ops.loads before every
-- check (new, restated or re-quarantined loads), so it is never trusted blindly.
create table if not exists ops.accepted_txn_ids (
    txn_id varchar not null,
    load_id varchar not null
);
create table if not exists ops.accepted_txn_id_loads (
    load_id varchar primary key,
    quarantined bigint not null
);

-- Pay periods per year of each pay frequency, rewritten from settings (payroll.annualisation) before the
-- layers are built: weekly 365.25/7, fortnightly 365.25/14, four-weekly 365.25/28 (a Julian year of
-- 365.25 days), or the payroll convention 52/26/13; semi-monthly 24, monthly 12.
create or replace table ref.pay_frequencies (
    frequency varchar primary key,
    periods_per_year double not null,
    convention varchar not null
);

-- The institution's business calendar around the feature window, rewritten before the layers are built
-- (ledgerband.tasks.layers.business_calendar): weekends and public holidays are not business days; pay due on
-- one lands on the business day before or after it.
create table if not exists ref.business_calendar (
    day date primary key,
    is_business_day boolean not null,
    prev_business_day date not null,       -- latest business day on or before day
    next_business_day date not null,       -- earliest business day on or after day
    iso_weekday integer not null,          -- 1 Monday .. 7 Sunday
    day_of_month integer not null,
    days_in_month integer not null,
    month_index integer not null           -- year * 12 + month - 1
);

-- The band scheme in force, rewritten from settings at every publish. Bands are half-open [lower, upper).
create table if not exists ref.income_bands (
    band_index integer not null,
    income_band varchar not null,
    lower_bound double,                    -- null: no lower bound
    upper_bound double,                    -- null: no upper bound
    band_label varchar not null
);

create table if not exists ml.model_runs (
    run_id varchar not null,
    period varchar not null,
    candidate varchar not null,
    rmse_mean double, rmse_std double, mae_mean double, mae_std double,
    n_labelled bigint, n_folds bigint,
    is_champion boolean not null,
    created_at timestamp not null,
    band_accuracy_mean double,
    within_one_band_mean double,
    n_compared bigint,
    is_baseline boolean,
    model_sha256 varchar                   -- of the champion's skops file: loaded only when it matches
);

create table if not exists ml.cv_scores (
    run_id varchar not null,
    candidate varchar not null,
    split_index bigint not null,
    rmse double not null,
    mae double not null,
    repeat_index bigint,
    fold_index bigint,
    band_accuracy double,
    within_one_band double
);

-- Grain: one row per (run_id, customer_id): the champion's estimate for every customer, the held-out
-- figures of the labelled (ledgerband.tasks.modeling.intervals: for labelled customers in the comparison,
-- the estimate and interval of a conformal model that never saw them; coverage is measured on these), and
-- what readers get, decided once by ledgerband.tasks.modeling.amounts.published_figures (the publish SQL
-- only reads it).
create table if not exists ml.predictions (
    run_id varchar not null,
    customer_id varchar not null,
    estimate double not null,
    oof_estimate double,                   -- out-of-fold estimate for labelled customers (band metrics)
    annual_salary double,                  -- observed label, null when the salary is not paid here
    income_value double,                   -- the published amount
    band_index integer,                    -- its band
    observed_pension double,               -- a pension read from its credits (payroll.pensions_observed)
    estimate_low double,                   -- the published interval, rounded outwards (null: observed)
    estimate_high double,
    band_confidence double,                -- share of the interval inside the band, two decimals
    oof_low double,
    oof_high double,
    band_source varchar                    -- observed_salary | observed_pension | model_estimate
);

-- Grain: one row per (run_id, attribute, group_name). Out-of-fold error of the champion by group
-- (Fairlearn MetricFrame); attribute 'observed_band' holds interval coverage per observed band.
create table if not exists ml.group_errors (
    run_id varchar not null,
    attribute varchar not null,            -- sex | age_band | home_region | observed_band
    group_name varchar not null,
    customers bigint not null,
    mae double,
    mean_error double,                     -- estimate minus observed: positive = overestimates
    band_accuracy double,
    coverage double,                       -- share of observed salaries inside the held-out interval
    in_gap boolean not null                -- counted in the largest gap (enough customers)
);

-- Grain: one row per (run_id, n_train): the champion's held-out MAE learning from n_train customers.
create table if not exists ml.learning_curve (
    run_id varchar not null,
    n_train bigint not null,
    mae_mean double not null,
    mae_std double
);

-- Grain: one row per (run_id, feature): labelled vs estimated customers, standardised mean difference.
create table if not exists ml.population_shift (
    run_id varchar not null,
    feature varchar not null,
    labelled_mean double,
    estimated_mean double,
    standardised_difference double
);

-- Grain: one row per (run_id, subject, bin_index): this run's bins and shares of each feature, the label
-- and the band shares; the next month's drift gate compares with them (ledgerband.tasks.gates.drift).
create table if not exists ml.drift_profiles (
    run_id varchar not null,
    subject varchar not null,
    bin_index integer not null,
    lower_edge double not null,            -- -inf for the first bin
    upper_edge double not null,            -- +inf for the last bin
    share double not null,
    customers bigint not null
);

-- Grain: one row per (run_id, subject): population stability index against an earlier published run.
create table if not exists ml.drift (
    run_id varchar not null,
    compared_with_run varchar not null,
    subject varchar not null,
    psi double not null,
    customers_then bigint not null,
    customers_now bigint not null
);

-- One row per run, gate, check and subject: the decision and every figure behind it (JSON).
create table if not exists published.decisions (
    run_id varchar not null,
    period varchar not null,
    gate varchar not null,                 -- 'quality' | 'accuracy'
    decision varchar not null,             -- 'pass' | 'warn' | 'stop'
    reason varchar not null,
    figures json not null,
    thresholds json not null,
    decided_at timestamp not null,
    check_name varchar,                    -- which check decided (e.g. manifest_reconciliation)
    subject varchar                        -- on what: an extract's file name, or 'run'
);

create table if not exists published.snapshots (
    run_id varchar primary key,
    period varchar not null,
    model_version varchar not null,
    band_edges json not null,
    customer_count bigint not null,
    is_current boolean not null,
    published_at timestamp not null
);

-- The published tables' history: one snapshot per publishing run. Columns in the readers' order
-- (ledgerband.tasks.publish.readers_contract): the current views and the history show the same columns
-- in the same order.
create table if not exists published.income_bands_history (
    run_id varchar not null,
    period varchar not null,
    customer_id varchar not null,
    income_band varchar not null,
    band_source varchar not null,          -- observed_salary | observed_pension | model_estimate
    annual_income_estimate decimal(18, 2) not null,
    currency varchar,
    estimate_low decimal(18, 2),           -- a model estimate's interval at intervals.level
    estimate_high decimal(18, 2),
    band_confidence decimal(3, 2),         -- share of it inside the published band
    model_version varchar not null,
    published_at timestamp not null
);

create table if not exists published.band_summary_history (
    run_id varchar not null,
    period varchar not null,
    income_band varchar not null,
    home_region varchar not null,
    band_source varchar not null,
    customer_count bigint not null,
    suppressed boolean
);

create table if not exists published.band_movers_history (
    run_id varchar not null,
    period varchar not null,
    previous_period varchar not null,
    from_band varchar not null,
    to_band varchar not null,
    band_source varchar not null,
    customer_count bigint not null,
    suppressed boolean not null
);

-- Readers see only the current snapshot; publishing moves `is_current` inside one transaction. This is
-- the one definition of "current": the readers' copy, exports and reports read these views.
create or replace view published.income_bands as
select h.*
from published.income_bands_history as h
inner join published.snapshots as s on s.run_id = h.run_id and s.is_current;

create or replace view published.band_movers as
select h.*
from published.band_movers_history as h
inner join published.snapshots as s on s.run_id = h.run_id and s.is_current;

create or replace view published.band_summary as
select h.*
from published.band_summary_history as h
inner join published.snapshots as s on s.run_id = h.run_id and s.is_current;

-- One row per run of the monthly flow.
create table if not exists ops.runs (
    run_id varchar primary key,
    period varchar not null,
    started_at timestamp not null,
    finished_at timestamp,
    status varchar not null,               -- running | published | withheld | stopped | failed | crashed
    error varchar,
    stages json,                           -- [{stage, status, seconds, detail}]
    gate_figures json
);

-- One row per alert delivery attempt group (ledgerband.tasks.alerts): every alert is also in the local log.
create table if not exists ops.alerts (
    alert_id varchar primary key,
    run_id varchar,
    period varchar,
    audience varchar not null,
    channel varchar not null,      -- the URL's scheme (mailto, json, ...) or local_log; never the URL
    status varchar not null,       -- delivered | undelivered | logged (no URL configured)
    attempts integer not null,
    error varchar,
    title varchar not null,
    sent_at timestamp not null     -- UTC
);

-- One row per accepted load a restatement replaced (ledgerband.tasks.ops.restate).
create table if not exists ops.restatements (
    restatement_id varchar not null,
    period varchar not null,
    old_load_id varchar not null,
    old_source_file varchar not null,
    old_sha256 varchar not null,
    reason varchar not null,
    requested_at timestamp not null,
    status varchar not null,               -- pending | done | failed (the old load was put back)
    run_id varchar,
    error varchar
);
