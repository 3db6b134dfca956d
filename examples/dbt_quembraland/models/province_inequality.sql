-- Inequality of household income per province and year in the Republic of Quembraland (invented data).
-- gini, top_share, palma and theil are DuckDB macros created by the on-run-start hook.
select
    province,
    year,
    count(*) as households,
    gini(income, weight) as gini,
    top_share(income, 0.1, weight) as top10_share,
    palma(income, weight) as palma,
    theil(income, weight) as theil
from {{ ref('households') }}
group by province, year
