-- Alerts that did not reach their owners, newest first (`ledgerband status` shows them before the runs).
-- Grain: one row per undelivered alert to one audience by one channel, the latest $alerts. Key: none
-- (an alert's rows are told apart by sent_at, audience and channel).
-- Reads: ops.alerts.
-- Parameters: $alerts.

select
    sent_at,
    period,
    audience,
    channel,
    attempts,
    error,
    run_id
from ops.alerts
where status = 'undelivered'
order by sent_at desc
limit $alerts
