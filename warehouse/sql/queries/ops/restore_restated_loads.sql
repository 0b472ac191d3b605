-- Puts a failed restatement's old loads back in force (accepted again, with why), when the corrected
-- file was not accepted.
-- Grain: one updated row per load the restatement had set aside. Key: load_id.
-- Reads: ops.loads, ops.restatements.
-- Writes: ops.loads.
-- Parameters: $status, $reason, $restatement_id.

update ops.loads
set
    status = $status,
    reason = $reason
where load_id in (
    select restatements.old_load_id
    from ops.restatements as restatements
    where restatements.restatement_id = $restatement_id
)
