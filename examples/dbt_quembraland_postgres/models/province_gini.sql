-- Gini of household income per province and year in the Republic of Quembraland (invented data).
-- gini(x, w ORDER BY x) is the aggregate uneven.install registered in PostgreSQL (prepare.py).
select
    province,
    year,
    count(*) as households,
    gini(income, weight order by income) as gini
from {{ ref('households') }}
group by province, year
