import pytest


@pytest.fixture(scope="session")
def prefect_api():
    """One temporary Prefect API for every flow test in the session (starting one takes ~15 s)."""
    from prefect.testing.utilities import prefect_test_harness

    with prefect_test_harness(server_startup_timeout=120):
        yield
