"""Errors a user can act on. The CLI prints their message (no traceback) and exits non-zero."""

from __future__ import annotations


class LedgerbandError(Exception):
    """A problem with input, configuration or state that the operator can fix."""

    exit_code = 2


class ExtractError(LedgerbandError):
    """An extract or manifest cannot be taken in as it is (names the file and, where known, the line)."""


class GateStopped(LedgerbandError):
    """A gate decided to stop the run; names the gate, the figure and the threshold.

    Raised only by `ledgerband.tasks.gates.enforce`, after the decision is recorded.
    """

    exit_code = 3
    # Checks of a file against its own contract: a failure is bad input (exit 2), not a gate's judgement.
    BAD_INPUT_CHECKS = frozenset({"manifest_reconciliation", "extract_contract"})

    def __init__(self, gate: str, reason: str, check: str | None = None):
        super().__init__(f"{gate} gate stopped the run: {reason}")
        self.gate = gate
        self.reason = reason
        self.check = check
        if check in self.BAD_INPUT_CHECKS:
            self.exit_code = LedgerbandError.exit_code

    @property
    def run_status(self) -> str:
        """How ops.runs names the run's end: an accuracy or drift stop withholds a sound month (the data
        passed its checks, the estimates did not); others stop it."""
        return "withheld" if self.gate in ("accuracy", "drift") else "stopped"

    def with_report(self, report: str | None) -> GateStopped:
        """The same stop, its message pointing at the run report (when one was written)."""
        return GateStopped(self.gate, f"{self.reason} — report: {report}", self.check) if report else self


class ValidationEngineError(LedgerbandError):
    """The expectation engine could not evaluate a rule (never treated as pass or fail)."""


class ModelFileRefused(LedgerbandError):
    """A saved model file is not the one this pipeline wrote (its checksum differs, or none was recorded)."""


class PublishWriteError(LedgerbandError):
    """The readers' copy or Parquet could not be written (disk full, read-only folder); what readers had
    before is left in place. Not retried: neither mends itself in seconds."""
