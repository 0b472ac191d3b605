"""Operating the monthly run: the run record (ops.runs), the run lock, which month a schedule reads, restating a month, fault points for the crash tests."""
