-- features.customer
-- Grain: one row per customer in the current reference file. Key: customer_id.
-- Reads: staging.transactions, staging.customers.
-- Parameters: $window_start, $window_end (dates, inclusive), $large_debit_threshold.
-- Behaviour over the window from every transaction except coded payroll credits, so the label (salary)
-- cannot leak into the features. Customers with no transactions get zero counts and null amounts.
-- sex and age_years are carried for error-by-group analysis only; they are not model features.

with

customers as (
    select * from staging.customers
),

transactions as (
    select *
    from staging.transactions
    where booking_date between $window_start and $window_end
        and not is_payroll_coded
),

activity as (
    select
        customer_id,
        count(*)::bigint as txn_count,
        count(distinct booking_date)::bigint as days_with_txn,
        avg(amount)::double as mean_txn_amount,
        max(amount) filter (where direction = 'DBIT')::double as largest_debit,
        count(*) filter (where direction = 'DBIT' and amount > $large_debit_threshold)::bigint
            as count_large_debits,
        coalesce(sum(amount) filter (where direction = 'DBIT'), 0)::double as total_debit_amount,
        median(balance_after)::double as median_balance
    from transactions
    group by customer_id
),

region_counts as (
    select customer_id, merchant_region, count(*) as txn_count
    from transactions
    where merchant_region is not null
    group by all
),

top_region as (
    -- Most frequent merchant region; ties go to the alphabetically first region, so reruns agree.
    select customer_id, merchant_region as top_merchant_region
    from region_counts
    qualify row_number() over (partition by customer_id order by txn_count desc, merchant_region) = 1
),

final as (
    select
        customers.customer_id,
        customers.home_region,
        customers.sex,
        date_diff('year', customers.birth_date, $window_end::date)
            - case when strftime(customers.birth_date, '%m-%d') > strftime($window_end::date, '%m-%d') then 1 else 0 end
            as age_years,
        coalesce(activity.txn_count, 0) as txn_count,
        coalesce(activity.txn_count, 0) / ((($window_end::date - $window_start::date) + 1) / 7.0) as txn_per_week,
        coalesce(activity.days_with_txn, 0) as days_with_txn,
        activity.mean_txn_amount,
        activity.largest_debit,
        coalesce(activity.count_large_debits, 0) as count_large_debits,
        coalesce(activity.total_debit_amount, 0) as total_debit_amount,
        activity.median_balance,
        coalesce(top_region.top_merchant_region, 'none') as top_merchant_region
    from customers
    left join activity on activity.customer_id = customers.customer_id
    left join top_region on top_region.customer_id = customers.customer_id
)

select * from final
