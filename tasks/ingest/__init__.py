"""Ingest: landing files (the extract contract, manifests, text records) into raw.* with lineage; ops.loads."""
