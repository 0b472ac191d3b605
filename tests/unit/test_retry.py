import pytest
from prefect.states import Failed

from ledgerband.tasks.core.errors import ExtractError, GateStopped
from ledgerband.tasks.core.task_policy import retry_on_io


@pytest.mark.parametrize(
    "exc, retried",
    [
        (TimeoutError("share did not answer"), True),  # transient I/O: worth another try
        (ConnectionResetError(), True),
        (FileNotFoundError("gone"), False),  # permanent: a retry only delays the alert
        (PermissionError("denied"), False),
        (ExtractError("bad manifest"), False),  # deterministic input problems are never retried
        (GateStopped("quality", "too many bad records"), False),
        (ValueError("bug"), False),
    ],
)
def test_only_transient_io_failures_are_retried(exc, retried):
    assert retry_on_io(None, None, Failed(data=exc)) is retried
