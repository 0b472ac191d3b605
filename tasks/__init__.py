"""Pipeline stages: each module is one stage, a thin Prefect wrapper over plain functions.

Importing this package first points Prefect, Great Expectations and DuckDB at the project's state
folder and keeps them offline and quiet, so nothing is written to the user's home directory.
"""

from tasks._env import configure_process_env

configure_process_env()
