-- Inequality of household income per province and year in the Republic of Quembraland (invented data).
-- gini(x, w ORDER BY x), theil(x, w), atkinson(x, eps, w) and cv(x, w) are the aggregates
-- uneven.install registered in PostgreSQL (prepare.py).
select
    province,
    year,
    count(*) as households,
    gini(income, weight order by income) as gini,
    theil(income, weight) as theil,
    atkinson(income, 0.5, weight) as atkinson_half,
    cv(income, weight) as cv
from {{ ref('households') }}
group by province, year
