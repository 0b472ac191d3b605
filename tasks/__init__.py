"""Pipeline stages and their shared core.

One module per stage (`ingest`, `validate`, `features`, `train`, `publish`, `report`), each a thin Prefect
task over plain functions; beside them the core every stage uses: `period`, `context` (the run context),
`settings`, `errors`, `warehouse`, `loads`, `runlog`, `bands`, `gates/`, `alerts/`, `landing/`. The demo
generator lives apart in `demo/`. Importing this package changes nothing in the process: environment
set-up is done by the entry points (`ledgerband.tasks.core.runtime.configure_process_env`).
"""
