"""The core every stage uses: periods, the run context, settings, errors, the warehouse connection and SQL files, task policies (retries, timeouts), the Dask cluster."""
