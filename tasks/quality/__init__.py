"""Quality: the expectation suites evaluated (DuckDB push-down, GX the reference engine), quarantine, code lists."""
