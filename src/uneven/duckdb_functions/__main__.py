"""python -m uneven.duckdb_functions [PATH]: regenerate sql/duckdb/install.sql from the catalog."""

import sys

from uneven.duckdb_functions.install import INSTALL_SQL, write_install_sql

if __name__ == "__main__":
    from pathlib import Path

    print(write_install_sql(Path(sys.argv[1]) if len(sys.argv) > 1 else INSTALL_SQL))
