"""Errors a user can act on. The CLI prints their message (no traceback) and exits non-zero."""


class LedgerbandError(Exception):
    """A problem with input, configuration or state that the operator can fix."""

    exit_code = 2


class ExtractError(LedgerbandError):
    """An extract or manifest cannot be taken in as it is (names the file and, where known, the line)."""


class GateStopped(LedgerbandError):
    """A gate decided to stop the run; names the gate, the figure and the threshold."""

    exit_code = 3

    def __init__(self, gate: str, reason: str):
        super().__init__(f"{gate} gate stopped the run: {reason}")
        self.gate = gate
        self.reason = reason

    def with_report(self, report: str | None) -> "GateStopped":
        """The same stop, its message pointing at the run report (when one was written)."""
        return GateStopped(self.gate, f"{self.reason} — report: {report}") if report else self


class ValidationEngineError(LedgerbandError):
    """The expectation engine could not evaluate a rule (never treated as pass or fail)."""
