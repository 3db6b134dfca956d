-- The table form: the out-of-core window plan, for inputs too large to hold one group in memory.
-- depends_on: {{ ref('households') }}
select province, gini as gini_table_form
from gini_by('{{ ref('households').identifier }}', 'income', 'weight', ['province'])
