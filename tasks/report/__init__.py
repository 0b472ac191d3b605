"""The run report (HTML, plots), the validation page and the Prefect run page."""
