"""Pipeline stages, grouped by what each part is for.

`core` (periods, run context, settings, errors, the warehouse), `ops` (run record, lock, schedule,
restate), `ingest`, `quality`, `layers`, `modeling`, `publish`, `report`, `gates`, `alerts`; the demo bank
lives apart in `demo`. Each stage is a thin Prefect task over plain functions. Importing this package
changes nothing in the process: environment set-up is done by the entry points
(`ledgerband.tasks.core.runtime.configure_process_env`).
"""
