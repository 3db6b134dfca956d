"""Create the catalog's measures inside a DuckDB connection, and write them as a plain SQL file.

``install(con)`` creates, for every catalog measure (user-defined ones included), an aggregate
macro (``gini(x[, w])``, see aggregate.py) and a table macro (``gini_by(source, value, weight,
keys)``, see table.py), plus the helper macros they call (``_uv_scan``…). It records what it
created in the table ``_uv_functions`` of the connection's current schema, never drops anything,
and refuses to overwrite a macro of the same name it did not create unless ``replace=True``.
In a database file everything persists: a later ``duckdb.connect(path)`` can call the functions
without uneven.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import duckdb
from sqlglot import exp

from uneven.catalog import MEASURES
from uneven.catalog.spec import Measure
from uneven.compiler.emit import checking, to_sql
from uneven.compiler.scalars import macro_body
from uneven.duckdb_functions import lists as L
from uneven.duckdb_functions.aggregate import aggregate_overloads
from uneven.duckdb_functions.symbolic import NeedsConstant
from uneven.duckdb_functions.table import table_form
from uneven.errors import ExecutionError, UnevenError

REGISTRY = "_uv_functions"
INSTALL_SQL = Path(__file__).resolve().parents[3] / "sql" / "duckdb" / "install.sql"


class FunctionConflictError(UnevenError):
    """A function of the same name exists in the database and was not created by uneven."""


@dataclass(frozen=True)
class Definition:
    name: str
    kind: str  # "helper" | "aggregate" | "table"
    measure: str | None
    statement: exp.Create


# The pass kinds the macro forms can express. Measures on other passes (standard errors, bootstrap,
# decompositions, concentration, paired differences) take further column arguments or named design
# options that a macro signature cannot carry yet; they run through the compiler only.
MACRO_PASSES = {"ordered", "moment", "centred", "entity"}


def has_macros(m: Measure) -> bool:
    kinds = set(m.passes) if isinstance(m.passes, tuple) else {m.passes}
    return kinds <= MACRO_PASSES and not any(p.kind == "column" for p in m.params) and not m.pass_options


def has_aggregate_macro(m: Measure) -> bool:
    """Whether the measure gets an aggregate macro (lorenz_curve and the relative poverty line
    measures have the table form only)."""
    if not has_macros(m):
        return False
    try:
        aggregate_overloads(m)
    except NeedsConstant:
        return False
    return True


def definitions(measures: list[Measure] | None = None) -> list[Definition]:
    """Every CREATE MACRO statement, helpers first, then per measure its aggregate and table forms."""
    helpers = [*L.scan_macros(), *L.segment_scan_macros(), L.budget_macro()]
    out = [Definition(c.this.this.name, "helper", None, c) for c in helpers]
    out.append(Definition("equivalised", "scalar", None, equivalised_macro()))
    for m in (measures if measures is not None else list(MEASURES.values())):
        if not has_macros(m):
            continue
        try:
            out.append(Definition(m.name, "aggregate", m.name, L.macro(m.name, aggregate_overloads(m))))
        except NeedsConstant:
            pass  # e.g. lorenz_curve: its k shapes the plan; see docs/registered_functions.md
        try:
            name, statement = table_form(m)
            out.append(Definition(name, "table", m.name, statement))
        except NeedsConstant:
            pass
    return out


def equivalised_macro() -> exp.Create:
    """equivalised(income, adults, children[, scale]): the compiler's scalar (compiler/scalars.py) as a
    macro; the scale is positional here (a macro overload), 'oecd_modified' when left out."""
    income, adults, children, scale = (exp.column(a) for a in ("income", "adults", "children", "scale"))
    return L.macro("equivalised", [(["income", "adults", "children"], macro_body(income, adults, children, None)),
                                   (["income", "adults", "children", "scale"],
                                    macro_body(income, adults, children, scale))])


# the printed statements of recent install() calls, keyed by the catalog entries they were built
# from (kept, and compared by identity: a measure defined anew is a new entry); building and printing
# every macro is most of install()'s time, and its text depends on those entries alone
_PRINTED: list[tuple[tuple[Measure, ...], list[tuple[Definition, str]]]] = []


def printed_definitions(measures: list[Measure] | None = None) -> list[tuple[Definition, str]]:
    """``definitions(measures)`` with each statement's SQL text, built once per set of catalog entries
    (anew while the emission check is on, so that it checks every print)."""
    key = tuple(measures if measures is not None else MEASURES.values())
    if not checking():
        for entries, printed in _PRINTED:
            if len(entries) == len(key) and all(a is b for a, b in zip(entries, key)):
                return printed
    printed = [(d, to_sql(d.statement, copy=False)) for d in definitions(list(key))]
    _PRINTED[:] = [(key, printed)] + _PRINTED[:3]
    return printed


def builtin_measures() -> list[Measure]:
    from uneven.catalog.user import user_measure_names

    return [m for name, m in MEASURES.items() if name not in user_measure_names()]


def install_sql(measures: list[Measure] | None = None) -> str:
    """The install script: one ``CREATE OR REPLACE MACRO`` statement per function."""
    head = ("-- uneven: inequality measures as DuckDB macros. Generated from the catalog by\n"
            "--   python -m uneven.duckdb_functions   (do not edit by hand)\n"
            "-- Run it in any DuckDB client (e.g. `.read sql/duckdb/install.sql`). Aggregate forms\n"
            "-- (gini(x[, w]) …) work in any GROUP BY; table forms (gini_by(source, value, weight, keys) …)\n"
            "-- run the out-of-core window plan. Note: CREATE OR REPLACE replaces macros of the same name.\n")
    body = "\n\n".join(to_sql(d.statement, copy=False) + ";" for d in definitions(
        builtin_measures() if measures is None else measures))
    return head + "\n" + body + "\n"


def write_install_sql(path: Path = INSTALL_SQL) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(install_sql(), encoding="utf-8")
    return path


def _existing_macros(con) -> dict[str, str]:
    rows = con.execute("SELECT function_name, function_type FROM duckdb_functions() WHERE NOT internal "
                       "AND database_name = current_database() AND schema_name = current_schema() "
                       "AND function_type IN ('macro', 'table_macro')").fetchall()
    return {name.lower(): kind for name, kind in rows}


def _recorded(con) -> set[str]:
    found = con.execute("SELECT count(*) FROM information_schema.tables WHERE table_name = ? "
                        "AND table_schema = current_schema() AND table_catalog = current_database()",
                        [REGISTRY]).fetchone()[0]
    if not found:
        return set()
    return {r[0].lower() for r in con.execute(exp.select("name").from_(REGISTRY).sql("duckdb")).fetchall()}


def installed(con: duckdb.DuckDBPyConnection) -> list[tuple[str, str, str | None]]:
    """(name, kind, measure) of every function uneven created in this database's current schema."""
    if not _recorded(con):
        return []
    query = exp.select("name", "kind", "measure").from_(REGISTRY).order_by("name")
    return [tuple(r) for r in con.execute(to_sql(query)).fetchall()]


def install(con: duckdb.DuckDBPyConnection, *, replace: bool = False,
            measures: list[str] | None = None) -> list[str]:
    """Create the measures as DuckDB macros in ``con``; returns the names created.

    ``replace=True`` overwrites macros of the same name that uneven did not create (otherwise
    :class:`FunctionConflictError`). ``measures`` limits the measures installed (default: all).
    A psycopg 3 connection gets the PostgreSQL aggregates of uneven/pg_functions.py instead
    (``gini(x[, w] ORDER BY x)``, theil, mld, ge, atkinson, cv, hhi).
    """
    if type(con).__module__.split(".")[0] == "psycopg":
        from uneven import pg_functions
        return pg_functions.install(con, replace=replace, measures=measures)
    if not isinstance(con, duckdb.DuckDBPyConnection):
        raise UnevenError(f"install(): con must be a duckdb connection, got {type(con).__name__}")
    chosen = None
    if measures is not None:
        unknown = [m for m in measures if m.lower() not in MEASURES]
        if unknown:
            raise UnevenError(f"install(): unknown measure {unknown[0]!r}; known: {', '.join(MEASURES)}")
        chosen = [MEASURES[m.lower()] for m in measures]
    printed = printed_definitions(chosen)
    defs = [d for d, _ in printed]
    ours = _recorded(con)
    existing = _existing_macros(con)
    clashes = [d.name for d in defs if d.name.lower() in existing and d.name.lower() not in ours]
    if clashes and not replace:
        raise FunctionConflictError(
            f"install(): the database already has macro(s) {', '.join(sorted(set(clashes)))} that uneven did not "
            "create; drop or rename them, or call install(con, replace=True) to overwrite them")
    try:
        con.execute("BEGIN TRANSACTION")
        con.execute(exp.Create(this=exp.Schema(this=exp.to_table(REGISTRY), expressions=[
            exp.ColumnDef(this=exp.to_identifier(c), kind=exp.DataType.build("varchar"))
            for c in ("name", "kind", "measure")]), kind="TABLE", exists=True).sql("duckdb"))
        for d, statement in printed:
            con.execute(statement)
            con.execute(exp.delete(REGISTRY, where=exp.column("name").eq(exp.Literal.string(d.name))).sql("duckdb"))
            con.execute(exp.insert(exp.values([(d.name, d.kind, d.measure)]), REGISTRY).sql("duckdb"))
        con.execute("COMMIT")
    except duckdb.Error as e:
        con.execute("ROLLBACK")
        raise ExecutionError(f"install(): DuckDB refused to create the functions: {str(e).splitlines()[0]}") from None
    return [d.name for d in defs]


def uninstall(con: duckdb.DuckDBPyConnection) -> list[str]:
    """Drop exactly the functions uneven recorded as created (and its record table)."""
    if type(con).__module__.split(".")[0] == "psycopg":
        from uneven import pg_functions
        return pg_functions.uninstall(con)
    done = []
    existing = _existing_macros(con)
    for name, _kind, _ in installed(con):
        if name.lower() in existing:
            table = existing[name.lower()] == "table_macro"
            # sqlglot has no DROP MACRO node: a command whose only variable part is a quoted identifier
            what = "MACRO TABLE" if table else "MACRO"  # it exists: checked above
            con.execute(" ".join(("DROP", what, exp.to_identifier(name, quoted=True).sql("duckdb"))))
            done.append(name)
    con.execute(exp.Drop(tables=[exp.to_table(REGISTRY)], kind="TABLE", exists=True).sql("duckdb"))
    return done
