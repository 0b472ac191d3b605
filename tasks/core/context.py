"""The run context: everything a stage needs to know about the run it belongs to, built once by the flow."""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from ledgerband.tasks.core.period import Period, Window
from ledgerband.tasks.core.settings import PayrollSettings, Settings, get_settings


@dataclass(frozen=True)
class RunContext:
    """One monthly run: its id, its period and feature window, where its files are, its settings."""

    run_id: str
    period: Period
    window: Window  # the months behavioural features see
    salary_window: Window  # the months pay credits are read from (payroll.lookback_months)
    landing_dir: Path
    settings: Settings
    started_at: datetime

    @classmethod
    def create(
        cls,
        period: str | Period,
        landing_dir: Path | str | None = None,
        *,
        settings: Settings | None = None,
        run_id: str | None = None,
    ) -> RunContext:
        """The context for running `period`; the period is parsed here and nowhere after."""
        settings = settings or get_settings()
        period = Period.parse(period)
        return cls(
            run_id=run_id or str(uuid.uuid4()),
            period=period,
            window=period.window(settings.features.window_months),
            salary_window=period.window(settings.payroll.lookback_months),
            landing_dir=Path(landing_dir) if landing_dir else settings.landing,
            settings=settings,
            started_at=datetime.now(),
        )

    @property
    def load_window(self) -> Window:
        """Every month the run needs loaded: the longer of the feature and salary windows."""
        return max(self.window, self.salary_window, key=len)

    @property
    def warehouse(self) -> Path:
        return self.settings.warehouse_path

    @property
    def customers_file(self) -> Path:
        return self.landing_dir / "customers.csv"

    @property
    def verified_incomes_file(self) -> Path:
        """The optional file of verified incomes, beside the customer reference file."""
        return self.landing_dir / "verified_incomes.csv"  # ingest.extract_contract.VERIFIED_INCOMES_FILE

    def layer_params(self) -> dict:
        """Bound parameters of the layer SQL files (each file binds the ones it uses)."""
        return {
            "run_id": self.run_id,
            "window_start": self.window.start,
            "window_end": self.window.end,
            "salary_window_start": self.salary_window.start,
            "large_debit_threshold": self.settings.features.large_debit_threshold,
            **payroll_params(self.settings.payroll),
        }


PAYROLL_PARAMETERS = (
    "min_payer_customers",
    "max_missed_runs",
    "due_grace_days",
    "max_last_pay_change",
    "pensions_observed",
    "explained_per_left_over",
    "same_day_bonus_multiple",
    "steady_pay_peak",
    "semi_monthly_halves_ratio",
    "unexplained_current_days",
    "early_pay_days",
)


def payroll_params(payroll: PayrollSettings) -> dict:
    """The payroll settings the salary SQL files bind, under their own names."""
    return {name: getattr(payroll, name) for name in PAYROLL_PARAMETERS}
