"""The catalog's measures registered inside DuckDB: aggregate macros, table macros, install.sql."""

from uneven.duckdb_functions.install import (
                                              FunctionConflictError,
                                              install,
                                              install_sql,
                                              installed,
                                              uninstall,
                                              write_install_sql,
)

__all__ = ["install", "uninstall", "installed", "install_sql", "write_install_sql", "FunctionConflictError"]
