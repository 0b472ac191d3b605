-- Migration 1 (2026-12-05): a warehouse written before schema.sql held its tables in their final form.
-- Until then schema.sql grew tables by `alter table ... add column if not exists`; every one of those is
-- here, so a warehouse of any earlier version gets the columns it lacks (in the order schema.sql now
-- declares them). ml.predictions gains band_source, filled from the rule that set it then (observed
-- salary, then observed pension, then the model). published.income_bands_history is rebuilt with its
-- columns in the readers' order (DuckDB cannot move a column), its rows unchanged.
-- Runs inside one transaction with its row in ops.schema_migrations (ledgerband.tasks.core.warehouse).

alter table ops.loads add column if not exists last_seen_at timestamp;

alter table ml.model_runs add column if not exists band_accuracy_mean double;
alter table ml.model_runs add column if not exists within_one_band_mean double;
alter table ml.model_runs add column if not exists n_compared bigint;
alter table ml.model_runs add column if not exists is_baseline boolean;
alter table ml.model_runs add column if not exists model_sha256 varchar;

alter table ml.cv_scores add column if not exists repeat_index bigint;
alter table ml.cv_scores add column if not exists fold_index bigint;
alter table ml.cv_scores add column if not exists band_accuracy double;
alter table ml.cv_scores add column if not exists within_one_band double;

alter table ml.predictions add column if not exists income_value double;
alter table ml.predictions add column if not exists band_index integer;
alter table ml.predictions add column if not exists observed_pension double;
alter table ml.predictions add column if not exists estimate_low double;
alter table ml.predictions add column if not exists estimate_high double;
alter table ml.predictions add column if not exists band_confidence double;
alter table ml.predictions add column if not exists oof_low double;
alter table ml.predictions add column if not exists oof_high double;
alter table ml.predictions add column if not exists band_source varchar;
update ml.predictions
set
    band_source = case
        when annual_salary is not null then 'observed_salary'
        when observed_pension is not null then 'observed_pension'
        else 'model_estimate'
    end
where band_source is null;

alter table published.decisions add column if not exists check_name varchar;
alter table published.decisions add column if not exists subject varchar;

alter table published.band_summary_history add column if not exists suppressed boolean;

alter table published.income_bands_history add column if not exists estimate_low decimal(18, 2);
alter table published.income_bands_history add column if not exists estimate_high decimal(18, 2);
alter table published.income_bands_history add column if not exists band_confidence decimal(3, 2);
alter table published.income_bands_history add column if not exists currency varchar;

create table published.income_bands_history_reordered (
    run_id varchar not null,
    period varchar not null,
    customer_id varchar not null,
    income_band varchar not null,
    band_source varchar not null,
    annual_income_estimate decimal(18, 2) not null,
    currency varchar,
    estimate_low decimal(18, 2),
    estimate_high decimal(18, 2),
    band_confidence decimal(3, 2),
    model_version varchar not null,
    published_at timestamp not null
);
insert into published.income_bands_history_reordered by name
select * from published.income_bands_history;
drop table published.income_bands_history;
alter table published.income_bands_history_reordered rename to income_bands_history;
