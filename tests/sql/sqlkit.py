"""Helpers for SQL tests: hand-made ledger lines go through raw -> staging like real ones."""

from __future__ import annotations

from datetime import date, datetime, timedelta

from ledgerband.tasks.ingest.extract_contract import LEDGER_COLUMNS


class Ledger:
    def __init__(self, con):
        self.con = con
        self.lines: list[dict] = []

    def add(
        self,
        customer_id: str,
        booking_date: date,
        amount: float,
        direction: str = "DBIT",
        *,
        purpose_code: str | None = None,
        bank_txn_code: str = "PMNT/CCRD/POSD",
        counterparty_id: str | None = None,
        merchant_region: str | None = None,
        balance_after: float = 100.0,
        txn_id: str | None = None,
    ) -> None:
        self.lines.append(
            {
                "txn_id": txn_id or f"T{len(self.lines) + 1:05d}",
                "account_id": f"A-{customer_id}",
                "customer_id": customer_id,
                "booking_date": booking_date.isoformat(),
                "amount": f"{amount:.2f}",
                "direction": direction,
                "currency": "EUR",
                "balance_after": f"{balance_after:.2f}",
                "bank_txn_code": bank_txn_code,
                "purpose_code": purpose_code,
                "counterparty_id": counterparty_id,
                "merchant_category": None,
                "merchant_region": merchant_region,
            }
        )

    def pay(
        self,
        customer_id: str,
        dates: list[date],
        amount: float,
        payer: str = "EMP-1",
        purpose_code="SALA",
        **kw,
    ) -> None:
        for d in dates:
            self.add(
                customer_id,
                d,
                amount,
                "CRDT",
                purpose_code=purpose_code,
                bank_txn_code="PMNT/RCDT/SALA" if purpose_code == "SALA" else "PMNT/RCDT/DMCT",
                counterparty_id=payer,
                **kw,
            )

    def load(self, customers: list[tuple[str, str, str]] | None = None, status: str = "accepted") -> None:
        """Write the lines as one load (plus a customer file) and build staging from them."""
        from ledgerband.tasks.core.warehouse import run_sql_file

        con = self.con
        now = datetime(2026, 11, 2, 6, 0)
        con.execute(
            "insert into ops.loads (load_id, dataset, period, source_file, sha256, status, loaded_at) "
            "values ('L1', 'ledger', '2026-10', 'f.csv', 'x', ?, ?)",
            [status, now],
        )
        for i, line in enumerate(self.lines, start=2):
            con.execute(
                f"insert into raw.ledger_lines (load_id, source_file, source_line, {', '.join(LEDGER_COLUMNS)}) "
                f"values ('L1', 'f.csv', ?, {', '.join('?' * len(LEDGER_COLUMNS))})",
                [i, *[line[c] for c in LEDGER_COLUMNS]],
            )
        con.execute(
            "insert into ops.loads (load_id, dataset, source_file, sha256, status, loaded_at) "
            "values ('C1', 'customers', 'customers.csv', 'y', 'accepted', ?)",
            [now],
        )
        ids = sorted({line["customer_id"] for line in self.lines})
        for i, (cid, birth, region) in enumerate(
            customers or [(c, "1980-01-01", "North Reach") for c in ids], start=2
        ):
            con.execute(
                "insert into raw.customers values ('C1', 'customers.csv', ?, ?, ?, 'F', ?, '2015-01-01')",
                [i, cid, birth, region],
            )
        run_sql_file(con, "staging", "transactions")
        run_sql_file(con, "staging", "customers")


def every(start: date, days: int, count: int) -> list[date]:
    return [start + timedelta(days=days * k) for k in range(count)]


WINDOW = {"window_start": date(2026, 8, 1), "window_end": date(2026, 10, 31), "large_debit_threshold": 100.0}


def build_salary(con, window: dict = WINDOW, **payroll) -> None:
    """Build the salary layers for `window` with default payroll settings (overridden by `payroll`)."""
    from ledgerband.tasks.core.context import payroll_params
    from ledgerband.tasks.core.period import Period
    from ledgerband.tasks.core.settings import Settings
    from ledgerband.tasks.core.warehouse import run_sql_file
    from ledgerband.tasks.layers.business_calendar import write_business_calendar, write_pay_frequencies

    settings = Settings(payroll=payroll)
    write_pay_frequencies(con, settings)
    start, end = window["window_start"], window["window_end"]
    months = (end.year - start.year) * 12 + end.month - start.month + 1
    write_business_calendar(con, Period.of(end).window(months), settings.payroll)
    params = {
        "salary_window_start": window["window_start"],
        **window,
        **payroll_params(settings.payroll),
    }
    for layer, name in (
        ("intermediate", "received_credits"),
        ("intermediate", "payers"),
        ("intermediate", "payroll_credits"),
        ("intermediate", "pay_calendars"),
        ("intermediate", "pay_calendar_matches"),
        ("intermediate", "pay_schedule_fits"),
        ("intermediate", "salary_streams"),
        ("features", "customer_label"),
        ("features", "customer_salary"),
    ):
        run_sql_file(con, layer, name, params)
