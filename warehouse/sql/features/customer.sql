-- features.customer
-- Grain: one row per customer in the current reference file. Key: customer_id.
-- Reads: staging.transactions, staging.customers.
-- Parameters: $window_start, $window_end (dates, inclusive), $large_debit_threshold.
-- Spending features come from debits only. Credits are left out on purpose: for customers paid here the
-- income arrives as payroll (the label), for everyone else it arrives as other credits, so any credit
-- feature would mean one thing in training and another for the customers the model estimates.
-- median_balance uses every posting: both groups' balances carry their income the same way.
-- Customers with no debits get zero counts and null amounts.
-- sex and age_years are carried for error-by-group analysis only; they are not model features.

with

customers as (
    select * from staging.customers
),

postings as not materialized (
    select *
    from staging.transactions
    where booking_date between $window_start and $window_end
),

spending as (
    select
        customer_id,
        count(*)::bigint as debit_count,
        count(distinct booking_date)::bigint as days_with_debit,
        avg(amount)::double as mean_debit_amount,
        max(amount)::double as largest_debit,
        count(*) filter (where amount > $large_debit_threshold)::bigint as count_large_debits,
        sum(amount)::double as total_debit_amount
    from postings
    where direction = 'DBIT'
    group by customer_id
),

balance_order as (
    -- The median balance is taken from a sort, not median(): DuckDB keeps a median's values in memory
    -- for every group at once and cannot spill them, which at a million customers is more than the
    -- memory limit (measured: 100k customers x 5 months needed between 0.8 and 1.2 GB for it alone).
    select
        customer_id,
        balance_after::double as balance,
        row_number() over (partition by customer_id order by balance_after) as balance_rank,
        count(*) over (partition by customer_id) as postings_with_balance
    from postings
    where balance_after is not null
),

balances as (
    -- the middle balance, or the mean of the middle two for an even count (as numpy.median)
    select
        customer_id,
        avg(balance) as median_balance
    from balance_order
    where balance_rank in ((postings_with_balance + 1) // 2, (postings_with_balance + 2) // 2)
    group by customer_id
),

region_counts as (
    select
        customer_id,
        merchant_region,
        count(*) as debit_count
    from postings
    where direction = 'DBIT' and merchant_region is not null
    group by all
),

top_region as (
    -- Most frequent merchant region; ties go to the alphabetically first region, so reruns agree.
    select
        customer_id,
        merchant_region as top_merchant_region
    from region_counts
    qualify row_number() over (partition by customer_id order by debit_count desc, merchant_region asc) = 1
),

final as (
    select
        customers.customer_id,
        customers.home_region,
        customers.sex,
        date_diff('year', customers.birth_date, $window_end::date)
        - case
            when strftime(customers.birth_date, '%m-%d') > strftime($window_end::date, '%m-%d') then 1 else 0
        end as age_years,
        coalesce(spending.debit_count, 0) as debit_count,
        coalesce(spending.debit_count, 0) / ((($window_end::date - $window_start::date) + 1) / 7.0)
            as debits_per_week,
        coalesce(spending.days_with_debit, 0) as days_with_debit,
        spending.mean_debit_amount,
        spending.largest_debit,
        coalesce(spending.count_large_debits, 0) as count_large_debits,
        coalesce(spending.total_debit_amount, 0) as total_debit_amount,
        balances.median_balance,
        coalesce(top_region.top_merchant_region, 'none') as top_merchant_region
    from customers
    left join spending on spending.customer_id = customers.customer_id
    left join balances on balances.customer_id = customers.customer_id
    left join top_region on top_region.customer_id = customers.customer_id
)

select * from final
