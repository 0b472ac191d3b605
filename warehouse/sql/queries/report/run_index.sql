-- Every run, newest first, with its gates' outcomes in the order decided and its champion: the reports'
-- index page.
-- Grain: one row per run. Key: run_id.
-- Reads: ops.runs, published.decisions, ml.model_runs.

select
    r.run_id,
    r.period,
    r.started_at,
    r.status,
    r.error,
    (
        select string_agg(d.gate || ' ' || d.decision, ', ' order by d.decided_at)
        from published.decisions as d
        where d.run_id = r.run_id
    ) as gates,
    (
        select m.candidate
        from ml.model_runs as m
        where m.run_id = r.run_id and m.is_champion
    ) as champion
from ops.runs as r
order by r.started_at desc
