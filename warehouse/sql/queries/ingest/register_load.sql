-- Writes the record of one file just written to raw.* (tasks/ingest/loads.py is ops.loads' only writer).
-- Grain: one written row per file handed to the pipeline. Key: load_id.
-- Reads: none.
-- Writes: ops.loads.
-- Parameters: $load_id, $dataset, $period, $source_file, $sha256, $manifest_row_count, $rows_in_file,
-- $rows_loaded, $rows_quarantined, $credit_total, $debit_total, $status, $reason, $run_id, $loaded_at,
-- $decided_at, $last_seen_at.

insert into ops.loads (
    load_id, dataset, period, source_file, sha256, manifest_row_count, rows_in_file, rows_loaded,
    rows_quarantined, credit_total, debit_total, status, reason, run_id, loaded_at, decided_at, last_seen_at
)
values (
    $load_id, $dataset, $period, $source_file, $sha256, $manifest_row_count, $rows_in_file, $rows_loaded,
    $rows_quarantined, $credit_total, $debit_total, $status, $reason, $run_id, $loaded_at, $decided_at,
    $last_seen_at
)
