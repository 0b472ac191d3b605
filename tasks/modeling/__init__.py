"""Modeling: candidates, repeated cross-validation, intervals, diagnostics (groups, shift, learning curve), bands."""
