-- Writes one gate decision of a run (tasks/gates `record`, after deleting the run's earlier word on the
-- same gate, check and subject).
-- Grain: one written row per run, gate, check and subject. Key: run_id, gate, check_name, subject.
-- Reads: none.
-- Writes: published.decisions.
-- Parameters: $run_id, $period, $gate, $check_name, $subject, $decision, $reason, $figures, $thresholds,
-- $decided_at.

insert into published.decisions by name
select
    $run_id as run_id,
    $period as period,
    $gate as gate,
    $check_name as check_name,
    $subject as subject,
    $decision as decision,
    $reason as reason,
    $figures::json as figures,
    $thresholds::json as thresholds,
    $decided_at as decided_at
