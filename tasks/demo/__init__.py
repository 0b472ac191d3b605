"""The demo: a fictional institution's extracts (`generator`) and the check against its true incomes (`truth`).

Kept apart from the pipeline stages: nothing in a monthly run imports this package.
"""
