"""One settings object for the whole pipeline.

Read, in rising precedence, from the defaults below, `ledgerband.toml` (path in `LEDGERBAND_CONFIG`,
else `ledgerband.toml` in the working directory), and `LEDGERBAND_*` environment variables (nested keys
with `__`, e.g. `LEDGERBAND_ACCURACY__MIN_MAE_SKILL=0.3`). Unknown keys fail loudly.

The defaults live here and only here; the repository's `ledgerband.toml` is the commented example, and
a test proves it says the same as these defaults.
"""

from __future__ import annotations

import os
from functools import lru_cache
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator
from pydantic_settings import (
    BaseSettings,
    PydanticBaseSettingsSource,
    SettingsConfigDict,
    TomlConfigSettingsSource,
)


def config_file() -> Path:
    """The settings file: `LEDGERBAND_CONFIG`, else `ledgerband.toml` in the working directory (optional).

    A file named by `LEDGERBAND_CONFIG` must exist: a typo in its path must not run on the defaults.
    """
    named = os.environ.get("LEDGERBAND_CONFIG")
    if named is None:
        return Path("ledgerband.toml")
    if not Path(named).is_file():
        raise ValueError(f"LEDGERBAND_CONFIG names {named}, which is not a file")
    return Path(named)


def default_home() -> Path:
    """The state folder: `LEDGERBAND_HOME`, else `.ledgerband/` in the working directory."""
    return Path(os.environ.get("LEDGERBAND_HOME", ".ledgerband")).absolute()


# Environment variables with this prefix hold alert URLs (secrets), not settings.
SECRET_ENV_PREFIX = "LEDGERBAND_ALERT_URLS"

# Models train.candidates may name (ledgerband.tasks.modeling.candidates builds each one).
MODEL_NAMES = ("linear_regression", "ridge", "decision_tree", "random_forest", "gradient_boosting")


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class QualitySettings(_Section):
    max_quarantine_share: float = Field(0.01, ge=0, le=1)
    """Largest share of an extract's rows that may be quarantined before the run stops."""
    max_broken_chain_share: float = Field(0.01, ge=0, le=1)
    """Largest share of an extract's accounts whose balances may fail to chain (those accounts' postings
    are quarantined) before the run stops: many breaks mean a damaged extract, not a few bad accounts."""
    max_field_length: int = Field(128, ge=8)
    """Longest text a ledger field may hold; a longer one quarantines its record (rule text_field_too_long)."""
    expected_sources: list[str] = []
    """Source systems that each send one extract a month (manifest field `source`). When set, a month is
    complete only when every listed source's manifest and file have arrived; empty: any number of
    extracts, each with its manifest."""
    chunk_rows: int = Field(250_000, gt=0)
    """Rows per chunk handed to GX for the rules it evaluates (bounds memory on large extracts)."""
    engine: Literal["duckdb", "gx"] = "duckdb"
    """Who evaluates the suite's column rules: "duckdb" translates each rule with a plain SQL reading into one
    predicate pass over the load (tasks/quality/pushdown.py; GX keeps any other rule); "gx" runs every rule
    through GX on pandas chunks (the reference; about 5x slower)."""


class AccuracySettings(_Section):
    """The accuracy gate: skill over the baselines, judged on lower confidence bounds, and honest intervals."""

    min_labelled_customers: int = Field(200, ge=10)
    confidence: float = Field(0.95, gt=0.5, lt=1)
    """One-sided level of the lower bounds on skill (corrected resampled t, Nadeau & Bengio 2003)."""
    min_mae_skill: float = Field(0.20, ge=0, lt=1)
    """Lower bound of 1 - MAE(champion) / MAE(best baseline) across the repeated CV splits."""
    min_band_skill: float = Field(0.20, ge=0, lt=1)
    """Lower bound of (band accuracy - baseline's) / (1 - baseline's): the share of the baseline's misses fixed."""
    coverage_tolerance: float = Field(0.05, gt=0, lt=1)
    """Held-out interval coverage must lie within this of the nominal level."""
    max_group_gap: float = Field(1.0, gt=0, le=1)
    """Largest band-accuracy gap between groups of one attribute; 1.0 (the default): reported, not gated."""
    min_group_customers: int = Field(30, ge=1)
    """Groups smaller than this are shown but left out of the gap (too few to measure)."""
    max_shift_auc: float = Field(0.75, gt=0.5, le=1)
    """Warn when a classifier tells estimated from labelled customers apart with a higher AUC."""


class IntervalSettings(_Section):
    """Prediction intervals around each estimate (conformal, MAPIE)."""

    level: float = Field(0.80, gt=0, lt=1)
    method: str = Field("cv", pattern="^(cv|split)$")
    """cv: the CV method (full-data model, out-of-fold scores); split: split conformal on a held-out part."""
    conformity_score: str = Field("gamma", pattern="^(absolute|gamma)$")
    """absolute: the same width for everyone; gamma: width proportional to the estimate."""
    calibration_share: float = Field(0.25, gt=0, lt=1)
    """Share of labelled customers held out to calibrate with the split method."""
    round_to: float = Field(1_000, gt=0)
    """Published model estimates and interval bounds are rounded to this unit (no false precision)."""


class DriftSettings(_Section):
    """Month-over-month drift of features, labels and band shares, and last month's model on this month."""

    bins: int = Field(10, ge=2, le=100)
    psi_warn: float = Field(0.10, gt=0)
    psi_stop: float = Field(0.25, gt=0)
    max_out_of_time_mae_rise: float = Field(0.25, gt=0)
    """Warn when last month's model is this much worse on this month's labels than its own CV said."""


class TrainSettings(_Section):
    cv_folds: int = Field(5, ge=2)
    cv_repeats: int = Field(3, ge=1)
    random_state: int = 20261101
    candidates: tuple[str, ...] = (
        "linear_regression",
        "ridge",
        "decision_tree",
        "random_forest",
        "gradient_boosting",
    )
    """Models compared beside the two baselines (mean, median), which always run."""
    tree_depths: tuple[int, ...] = (2, 3, 4, 6, 8, 10)
    """Depths the decision tree chooses from by inner 3-fold CV."""
    tree_min_samples_leaf: int = Field(20, ge=1)
    forest_trees: int = Field(60, ge=1)
    forest_max_samples: float = Field(0.5, gt=0, le=1)
    forest_max_tree_rows: int = Field(100_000, ge=100)
    """Each forest tree is grown on at most this many rows (its bootstrap draw; common practice to bound
    a forest's cost). Changes nothing below 2 x this many labelled customers at forest_max_samples 0.5."""
    boosting_max_iter: int = Field(200, ge=1)
    log_target: bool = False
    """Fit every model on log(1 + income) and transform estimates back (multiplicative errors)."""
    max_cv_customers: int = Field(20_000, ge=100)
    """Above this many labelled customers the comparison runs on a band-stratified sample of this size;
    the champion is still refitted on everyone."""
    n_jobs: int = Field(2, ge=1)
    """Worker processes for the comparison's splits, the learning curve and the conformal folds (each
    seeded: the figures do not depend on it), and the forest's threads; 1 runs everything in the run's
    own process."""

    @field_validator("candidates")
    @classmethod
    def _known_candidates(cls, v: tuple[str, ...]) -> tuple[str, ...]:
        unknown = sorted(set(v) - set(MODEL_NAMES))
        if unknown:
            raise ValueError(f"unknown candidates {unknown}; known: {', '.join(MODEL_NAMES)}")
        return v

    numeric_features: tuple[str, ...] = (
        "debits_per_week",
        "largest_debit",
        "count_large_debits",
        "days_with_debit",
        "mean_debit_amount",
        "median_balance",
        "total_debit_amount",
    )
    categorical_features: tuple[str, ...] = ("top_merchant_region", "home_region")
    protected_attributes: tuple[str, ...] = ("sex", "age_years", "birth_date")
    allow_protected_features: bool = False

    @model_validator(mode="after")
    def _no_protected_features(self) -> TrainSettings:
        used = set(self.numeric_features) | set(self.categorical_features)
        clash = sorted(used & set(self.protected_attributes))
        if clash and not self.allow_protected_features:
            raise ValueError(
                f"model features {clash} are protected attributes; remove them or set "
                "train.allow_protected_features = true after a documented legal review"
            )
        return self


class BandSettings(_Section):
    edges: tuple[float, ...] = (25_000, 40_000, 60_000, 85_000, 120_000)
    """Lower edges of every band but the first, in the ledger currency per year."""
    currency: str = "EUR"
    """The ledger's currency: every amount must be in it (ISO 4217 alphabetic code)."""

    @field_validator("currency")
    @classmethod
    def _iso_4217(cls, v: str) -> str:
        import pycountry

        if pycountry.currencies.get(alpha_3=v) is None:
            raise ValueError(f"bands.currency {v!r} is not an ISO 4217 currency code (pycountry's list)")
        return v

    @field_validator("edges")
    @classmethod
    def _increasing(cls, v: tuple[float, ...]) -> tuple[float, ...]:
        if not v or any(b <= a for a, b in zip(v, v[1:], strict=False)) or v[0] <= 0:
            raise ValueError("band edges must be positive and strictly increasing")
        return v


class PayrollSettings(_Section):
    """How pay credits become a salary label (intermediate.payroll_credits, intermediate.salary_streams)."""

    lookback_months: int = Field(4, ge=1, le=24)
    """Months of pay credits a salary is read from (four: four-weekly pay always shows four payments)."""
    holiday_country: str = ""
    """ISO 3166-1 alpha-2 code of the institution's country for public holidays (the `holidays` package); empty: none."""
    holidays: tuple[str, ...] = ("01-01", "03-14", "06-23", "10-05", "12-25", "12-26")
    """Further holidays: MM-DD every year, or YYYY-MM-DD once."""
    annualisation: str = Field("julian_year", pattern="^(julian_year|pay_periods)$")
    """julian_year: weekly x 365.25/7, fortnightly x 365.25/14, four-weekly x 365.25/28; pay_periods: 52/26/13."""
    max_missed_runs: int = Field(1, ge=0, le=3)
    due_grace_days: int = Field(2, ge=0, le=10)
    max_last_pay_change: float = Field(0.05, gt=0)
    """A last payment this far from the pay amount leaves the stream unsettled (no label) until the next."""
    pensions_observed: bool = True
    """A pension read from its credits is published as observed income (its own band_source)."""
    min_payer_customers: int = Field(3, ge=1)
    """An uncoded payer counts as an employer when it pays at least this many customers (or codes salary)."""
    explained_per_left_over: int = Field(3, ge=1)
    """A calendar fits a stream only when the payments it leaves over (bonuses, one-offs) are at most one
    per this many it explains."""
    same_day_bonus_multiple: float = Field(1.5, gt=1)
    """An explained payment over this multiple of the pay amount carries a bonus paid on the pay day."""
    steady_pay_peak: float = Field(1.25, gt=1)
    """Pay is steady when no explained payment is more than this multiple of the median."""
    semi_monthly_halves_ratio: float = Field(1.25, gt=1)
    """Two payments a month are semi-monthly pay only when the larger is at most this multiple of the smaller."""
    unexplained_current_days: int = Field(35, ge=1)
    """A stream no calendar explains is current when it paid within this many days (+ due_grace_days)."""
    early_pay_days: int = Field(10, ge=0)
    """A payment at most this many days before the next due day, after the last explained one, is that run
    paid early (pay brought forward before holidays): the stream stays current."""

    @field_validator("holidays")
    @classmethod
    def _dates(cls, v: tuple[str, ...]) -> tuple[str, ...]:
        from datetime import date

        for text in v:
            try:
                date.fromisoformat(text if len(text) == 10 else f"2000-{text}")
            except ValueError as exc:
                raise ValueError(f"payroll.holidays entry {text!r} is not MM-DD or YYYY-MM-DD") from exc
        return v

    def periods_per_year(self) -> dict[str, float]:
        """Pay periods per year for each frequency, by the configured convention."""
        cycles = (
            {"weekly": 365.25 / 7, "fortnightly": 365.25 / 14, "four_weekly": 365.25 / 28}
            if self.annualisation == "julian_year"
            else {"weekly": 52.0, "fortnightly": 26.0, "four_weekly": 13.0}
        )
        return {**cycles, "semi_monthly": 24.0, "monthly": 12.0}


class LabelSettings(_Section):
    """The label gate: a broken payroll feed stops the run instead of publishing."""

    min_labelled_share: float = Field(0.10, ge=0, le=1)
    max_irregular_share: float = Field(0.20, ge=0, le=1)
    max_coded_payroll_drop: float = Field(0.50, ge=0, le=1)
    max_median_label_change: float = Field(0.15, ge=0)


class FeatureSettings(_Section):
    window_months: int = Field(3, ge=1, le=24)
    large_debit_threshold: float = Field(100.0, gt=0)


class VerifiedSettings(_Section):
    """The optional verified incomes file (`verified_incomes.csv`): which of its records a run accepts."""

    max_age_months: int = Field(12, ge=1, le=120)
    """A verification older than this many months before the period's end is out of date (its record is
    quarantined, rule verified_on_recent): a year of pay rises and job changes separates it from today
    (our choice; lending files are commonly refreshed yearly)."""
    max_annual_income: float = Field(2_000_000, gt=0)
    """A verified annual net income above this (ledger currency) is taken for a keying error, not an income
    (rule annual_net_income_not_absurd; common practice: a bound far above any band edge)."""
    min_customers: int = Field(60, ge=1)
    """Verified estimated customers needed before the estimates are judged on them."""


class ReaderSettings(_Section):
    """What readers get: the published DuckDB copy, Parquet by period, and small-cell suppression."""

    min_cell_customers: int = Field(10, ge=1)
    """Aggregate cells with fewer customers are published as null and marked suppressed (threshold rule of
    statistical disclosure control; 10 is common practice)."""
    parquet: bool = True
    """Also write each published table as Parquet, partitioned by period (hive style)."""


class ScaleSettings(_Section):
    """How the heavy stages use the machine, or a Dask cluster past it."""

    memory_limit: str = Field("2GB", pattern=r"^(\d+(\.\d+)?\s*(KB|MB|GB|TB|KiB|MiB|GiB|TiB)|)$")
    """DuckDB's memory limit for the warehouse's work (it spills to disk beyond it); empty: DuckDB's own
    default, 80% of the machine's memory. Measured at 100k customers x 4 months: docs/bench.md."""
    threads: int = Field(0, ge=0)
    """DuckDB's threads; 0: one per core."""
    temp_directory: str = ""
    """Where DuckDB spills what does not fit memory_limit; empty: beside the warehouse (<warehouse>.tmp).
    A first run of a million customers spilled several GB at the 2GB limit: point this at a roomy disk."""
    max_temp_size: str = Field("", pattern=r"^(\d+(\.\d+)?\s*(KB|MB|GB|TB|KiB|MiB|GiB|TiB)|)$")
    """Most DuckDB may spill (its max_temp_directory_size); empty: DuckDB's default, 90% of the space free
    on that disk. Past it a stage fails with advice, before the disk itself is full."""
    bucket_customers: int = Field(25_000, ge=100)
    """The per-customer SQL layers (pay calendars, salary streams, features) run on buckets of about this
    many customers each, split by a hash of customer_id: memory is bounded by a bucket, not the bank."""
    runner: Literal["local", "dask"] = "local"
    """local: buckets one after the other in this process. dask: buckets, and the models' CV splits, on a
    Dask cluster through Prefect's Dask task runner."""
    dask_address: str = ""
    """A running Dask scheduler, e.g. "tcp://10.0.0.5:8786"; empty: a temporary local cluster."""
    dask_workers: int = Field(2, ge=1)
    """Worker processes of the temporary local cluster (one thread each); unused with dask_address."""
    shared_folder: str = ""
    """A folder every Dask worker can read and write at the same path (buckets are handed over as Parquet
    there); empty: <state folder>/buckets, enough for a local cluster."""


class ScheduleSettings(_Section):
    """The monthly deployment: when it runs, where, and how long a run may take."""

    cron: str = "0 6 3 * *"
    """06:00 on the 3rd: the core-banking month-end extract and its manifest land by the 2nd."""
    timezone: str = "Europe/Dublin"
    """IANA zone the cron is read in. A zone with daylight saving, so the run stays at 06:00 local
    through the change (a bare cron is UTC); set the institution's own zone."""
    deployment_name: str = "monthly"
    work_pool: str = "ledgerband-process"
    flow_timeout_minutes: float = Field(240, gt=0)
    """A run still going after this is failed (and the owners alerted) instead of hanging."""
    io_timeout_minutes: float = Field(60, gt=0)
    """Timeout of each task that reads or writes files (ingest, report, readers' copy)."""

    @field_validator("timezone")
    @classmethod
    def _known_zone(cls, v: str) -> str:
        from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

        try:
            ZoneInfo(v)
        except (ZoneInfoNotFoundError, ValueError) as exc:
            raise ValueError(f"schedule.timezone {v!r} is not an IANA time zone") from exc
        return v


class AlertSettings(_Section):
    """Who hears of a failed, stopped or withheld run. Each field names an environment variable holding
    apprise URLs (space or comma separated): URLs carry credentials, so they never sit in the TOML."""

    data_urls_env: str = "LEDGERBAND_ALERT_URLS_DATA"
    """Owners of ingest, validation and features (the quality gate)."""
    model_urls_env: str = "LEDGERBAND_ALERT_URLS_MODEL"
    """Owners of the labels, the models and the accuracy and drift gates."""
    publish_urls_env: str = "LEDGERBAND_ALERT_URLS_PUBLISH"
    """Owners of publishing, the report and the readers' copy."""
    attempts: int = Field(3, ge=1, le=10)
    retry_seconds: float = Field(2.0, ge=0)


class DemoSettings(_Section):
    institution: str = "Corrandale Mutual Savings"
    customers: int = Field(2_000, ge=50)
    months: int = Field(4, ge=1, le=24)
    end_period: str = "2026-10"
    seed: int = 7
    file_format: str = Field("csv", pattern="^(csv|parquet)$")


class Settings(BaseSettings):
    """Everything the pipeline reads from configuration."""

    model_config = SettingsConfigDict(
        env_prefix="LEDGERBAND_",
        env_nested_delimiter="__",
        extra="forbid",
        frozen=True,
    )

    home: Path = Field(default_factory=default_home)
    landing_dir: Path | None = None
    """Where extracts arrive (`<landing_dir>/<period>/`, `<landing_dir>/customers.csv`); default `<home>/landing`."""
    owners: tuple[str, ...] = ("data-engineering@corrandale.example",)
    quality: QualitySettings = QualitySettings()
    accuracy: AccuracySettings = AccuracySettings()
    intervals: IntervalSettings = IntervalSettings()
    drift: DriftSettings = DriftSettings()
    train: TrainSettings = TrainSettings()
    bands: BandSettings = BandSettings()
    features: FeatureSettings = FeatureSettings()
    payroll: PayrollSettings = PayrollSettings()
    labels: LabelSettings = LabelSettings()
    verified: VerifiedSettings = VerifiedSettings()
    readers: ReaderSettings = ReaderSettings()
    scale: ScaleSettings = ScaleSettings()
    schedule: ScheduleSettings = ScheduleSettings()
    alerts: AlertSettings = AlertSettings()
    demo: DemoSettings = DemoSettings()

    @classmethod
    def settings_customise_sources(
        cls,
        settings_cls: type[BaseSettings],
        init_settings: PydanticBaseSettingsSource,
        env_settings: PydanticBaseSettingsSource,
        dotenv_settings: PydanticBaseSettingsSource,
        file_secret_settings: PydanticBaseSettingsSource,
    ) -> tuple[PydanticBaseSettingsSource, ...]:
        # LEDGERBAND_CONFIG and LEDGERBAND_HOME steer where things are; they are not settings keys.
        return (
            init_settings,
            _FilteredEnv(settings_cls),
            TomlConfigSettingsSource(settings_cls, config_file()),
        )

    # Paths derived from home: one place that says where every piece of state lives.
    @property
    def warehouse_path(self) -> Path:
        return self.home / "warehouse.duckdb"

    @property
    def published_path(self) -> Path:
        return self.home / "published" / "ledgerband_published.duckdb"

    @property
    def parquet_dir(self) -> Path:
        return self.home / "published" / "parquet"

    @property
    def reports_dir(self) -> Path:
        return self.home / "reports"

    @property
    def models_dir(self) -> Path:
        return self.home / "models"

    @property
    def landing(self) -> Path:
        return self.landing_dir or self.home / "landing"

    @property
    def demo_landing_dir(self) -> Path:
        return self.home / "demo" / "landing"

    @property
    def demo_answers_path(self) -> Path:
        """The demo's true incomes: beside, never inside, the landing folder the pipeline reads."""
        return self.home / "demo" / "answers" / "true_income.csv"

    def demo_truth_path(self, run_id: str) -> Path:
        """The demo's truth check of one run (read by that run's report; demo only)."""
        return self.home / "demo" / "truth" / f"{run_id}.json"

    @property
    def alerts_log(self) -> Path:
        return self.home / "alerts" / "alerts.jsonl"


class _FilteredEnv(PydanticBaseSettingsSource):
    """Environment source that refuses misspelt `LEDGERBAND_*` variables instead of ignoring them."""

    # LEDGERBAND_CONFIG says where the TOML file is; LEDGERBAND_FAULT_AT is the crash tests' fault point
    # (tasks/ops/faults.py). Neither is a settings key.
    _locators = {"config", "fault_at"}

    def __init__(self, settings_cls: type[BaseSettings]):
        from pydantic_settings import EnvSettingsSource

        super().__init__(settings_cls)
        self._inner = EnvSettingsSource(settings_cls)

    def get_field_value(self, field, field_name):  # pragma: no cover - __call__ is used instead
        return None, field_name, False

    def __call__(self) -> dict:
        known = set(self.settings_cls.model_fields) | self._locators
        for name in os.environ:
            if name.upper().startswith(SECRET_ENV_PREFIX):
                continue  # alert URLs: read where they are used, never a settings key
            if name.upper().startswith("LEDGERBAND_"):
                top = name[len("LEDGERBAND_") :].split("__", 1)[0].lower()
                if top not in known:
                    raise ValueError(
                        f"environment variable {name} is not a ledgerband setting "
                        f"(known top-level keys: {', '.join(sorted(known))})"
                    )
        return self._inner()


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The process-wide settings (cached; tests call `get_settings.cache_clear()`)."""
    return Settings()
