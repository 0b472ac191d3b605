-- An accepted extract of the period with this file name, whatever its content (a corrected file sent
-- under the old name is a restatement, not a new month).
-- Grain: one row per such load, the earliest only (the check that calls this keeps it to one). Key: load_id.
-- Reads: ops.loads.
-- Parameters: $dataset, $status, $period, $file_name.

select load_id
from ops.loads
where
    dataset = $dataset
    and status = $status
    and period = $period
    and parse_filename(source_file) = $file_name
order by loaded_at
limit 1
