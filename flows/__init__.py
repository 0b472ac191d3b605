"""Prefect flows: they compose the stage tasks in `tasks/` and hold no business logic."""

import tasks  # noqa: F401  (sets PREFECT_HOME and friends before Prefect is imported)
