-- Inequality of household income per province and year in the Republic of Quembraland (invented data).
-- gini(x, w ORDER BY x), theil(x, w), atkinson(x, eps, w), cv(x, w) and the ordered-set aggregates
-- top_share(p) / palma() WITHIN GROUP (ORDER BY (x, w)) are the aggregates uneven.install registered
-- in PostgreSQL (prepare.py).
select
    province,
    year,
    count(*) as households,
    gini(income, weight order by income) as gini,
    theil(income, weight) as theil,
    atkinson(income, 0.5, weight) as atkinson_half,
    cv(income, weight) as cv,
    top_share(0.1) within group (order by (income, weight)) as top10_share,
    palma() within group (order by (income, weight)) as palma
from {{ ref('households') }}
group by province, year
