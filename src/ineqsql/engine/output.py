"""Writing results: atomically (temporary file, then rename), never over an existing file unless asked."""

from __future__ import annotations

import json
import math
import os
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from ineqsql.errors import OutputError

FORMATS = ("table", "csv", "json", "parquet")


def render_table(df: pd.DataFrame, max_rows: int = 200, float_format: str = "{:.6g}") -> str:
    if df.empty:
        return "(no rows)" if len(df.columns) else "(no columns)"
    with pd.option_context("display.max_rows", max_rows, "display.max_columns", None, "display.width", 200,
                           "display.float_format", float_format.format):
        return df.to_string(index=False)


def _serialize(df: pd.DataFrame, fmt: str, path: str | None):
    if fmt == "csv":
        return _nested_as_json(df).to_csv(path, index=False)
    if fmt == "json":
        text = to_json(df)
        return text + "\n" if path is None else Path(path).write_text(text + "\n")
    if fmt == "parquet":
        return df.to_parquet(path, index=False)
    return render_table(df) + "\n" if path is None else Path(path).write_text(render_table(df) + "\n")


def _plain(value):
    """JSON-ready Python value: floats keep every digit, NaN/NA become null, arrays become lists."""
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [_plain(v) for v in value]
    if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)):
        return None
    if isinstance(value, np.generic):
        return _plain(value.item())
    if isinstance(value, (pd.Timestamp,)):
        return value.isoformat()
    if isinstance(value, float) and math.isinf(value):
        return None
    return value


def _nested_as_json(df: pd.DataFrame) -> pd.DataFrame:
    """List and struct cells (e.g. lorenz_curve) as JSON text, so a CSV cell stays one line."""
    out = df.copy()
    for c in out.columns:
        if out[c].dtype == object:
            out[c] = [json.dumps(_plain(v)) if isinstance(v, (list, tuple, dict, np.ndarray)) else v for v in out[c]]
    return out


def to_json(df: pd.DataFrame) -> str:
    records = [{c: _plain(v) for c, v in zip(df.columns, row)} for row in df.itertuples(index=False, name=None)]
    return json.dumps(records, ensure_ascii=False, default=str)


def format_text(df: pd.DataFrame, fmt: str) -> str:
    if fmt == "parquet":
        raise OutputError("parquet output needs --output FILE")
    return _serialize(df, fmt, None)


def write_result(df: pd.DataFrame, path: str | os.PathLike, fmt: str, overwrite: bool = False) -> Path:
    """Write ``df`` to ``path`` atomically; refuse to replace an existing file unless ``overwrite``."""
    target = Path(path)
    if target.exists() and not overwrite:
        raise OutputError(f"{target} already exists; pass --force to replace it")
    if not target.parent.exists():
        raise OutputError(f"the folder {target.parent} does not exist")
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(fd)
    try:
        _serialize(df, fmt, tmp)
        os.replace(tmp, target)
    except BaseException as e:
        Path(tmp).unlink(missing_ok=True)
        if isinstance(e, (OSError, ValueError)):
            raise OutputError(f"could not write {target}: {e}") from None
        raise
    return target
