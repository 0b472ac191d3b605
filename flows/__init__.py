"""Prefect flows only: the monthly run, the demo, and the `ledgerband` command line. No business logic."""
