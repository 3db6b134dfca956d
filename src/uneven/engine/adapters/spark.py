"""Spark through a ``SparkSession`` (local or a cluster): compiled SQL runs with ``spark.sql``."""

from __future__ import annotations

from uneven.engine.adapters.base import NUMERIC, TEXT, Adapter

# Spark's simple type strings → DuckDB's spelling for the compiler's type check
_TYPES = {"tinyint": "TINYINT", "smallint": "SMALLINT", "int": "INTEGER", "bigint": "BIGINT", "float": "REAL",
          "double": NUMERIC, "boolean": "BOOLEAN", "string": TEXT, "binary": "BLOB", "date": "DATE",
          "timestamp": "TIMESTAMP", "void": "NULL"}


def _type(simple: str) -> str:
    if simple.startswith("decimal"):
        return "DECIMAL" + simple[len("decimal"):]
    if simple.startswith(("varchar", "char")):
        return TEXT
    return _TYPES.get(simple, simple.upper())


class SparkAdapter(Adapter):
    label = "Spark"
    dialect = "spark"

    def errors(self):
        from py4j.protocol import Py4JError
        from pyspark.errors import PySparkException
        return (PySparkException, Py4JError)

    def fetch(self, sql: str):
        df = self.con.sql(sql)
        fields = df.schema.fields
        return [f.name for f in fields], [tuple(r) for r in df.collect()], [_type(f.dataType.simpleString())
                                                                             for f in fields]

    def describe(self, sql: str):
        try:  # the schema is known after analysis: nothing runs
            df = self.con.sql(sql)
            return [(f.name, _type(f.dataType.simpleString())) for f in df.schema.fields]
        except Exception:  # noqa: BLE001
            return None

    def register(self, name: str, frame) -> None:
        if type(frame).__module__.startswith("pyspark"):
            frame.createOrReplaceTempView(name)
            return
        self.con.createDataFrame(frame).createOrReplaceTempView(name)

    def unregister(self, name: str) -> None:
        self.con.catalog.dropTempView(name)

    def has_table(self, name: str) -> bool:
        try:
            return bool(self.con.catalog.tableExists(name))
        except Exception:  # noqa: BLE001
            return False

    def plan(self, sql: str) -> str:
        _, rows, _ = self.fetch("EXPLAIN " + sql)
        return "\n".join(str(r[0]) for r in rows)

    def interrupt(self) -> None:
        self.con.sparkContext.cancelAllJobs()

    def close(self) -> None:
        if self.owned:
            self.con.stop()
