-- Marks every other run still 'running' as crashed, with a note of who found it and when. Only the run
-- holding the run lock calls it, so such a row belongs to a process that ended without finishing.
-- Grain: one updated row per such run, its run_id returned. Key: run_id.
-- Reads: ops.runs.
-- Writes: ops.runs.
-- Parameters: $crashed, $finished_at, $note, $running, $current_run_id.

update ops.runs
set
    status = $crashed,
    finished_at = $finished_at,
    error = coalesce(error || '; ', '') || $note
where status = $running and run_id <> $current_run_id
returning run_id
