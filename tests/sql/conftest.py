import pytest

from tests.sql.sqlkit import Ledger


@pytest.fixture
def ledger(con) -> Ledger:
    return Ledger(con)
