-- The figures of the latest label-gate decision that let an earlier month through (pass or warn): the
-- median label the run's median is compared with.
-- Grain: one row per such decision, the latest only. Key: none (a single row or none).
-- Reads: published.decisions.
-- Parameters: $gate, $period.

select figures
from published.decisions
where gate = $gate and decision in ('pass', 'warn') and period < $period
order by period desc, decided_at desc
limit 1
