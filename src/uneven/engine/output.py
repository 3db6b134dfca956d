"""Writing results: atomically (temporary file, then rename), never over an existing file unless asked."""

from __future__ import annotations

import json
import math
import os
import tempfile
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from uneven.errors import OutputError

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


def check_targets(paths: list[Path], overwrite: bool) -> None:
    """Refuse before any work: an existing file is kept unless replacing is asked for."""
    for p in paths:
        if p.exists() and not overwrite:
            raise OutputError(f"{p} already exists; pass --force to replace it")
        if not p.parent.exists():
            raise OutputError(f"the folder {p.parent} does not exist")


def _temp_beside(target: Path) -> tuple[int, str]:
    """A temporary file in the target's folder (so the rename is atomic), with the mode of an
    ordinary new file (mkstemp makes it private)."""
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    mask = os.umask(0o022)
    os.umask(mask)
    os.chmod(tmp, 0o666 & ~mask)
    return fd, tmp


def write_all(files: Mapping[Path, str | bytes], overwrite: bool = False) -> None:
    """Write several files all or nothing: each to a temporary file beside it, then renamed."""
    check_targets(list(files), overwrite)
    temps: list[tuple[str, Path]] = []
    target = None
    try:
        for target, content in files.items():
            fd, tmp = _temp_beside(target)
            temps.append((tmp, target))
            with os.fdopen(fd, "wb") as fh:
                fh.write(content.encode("utf-8") if isinstance(content, str) else content)
        for tmp, target in temps:
            os.replace(tmp, target)
    except BaseException as e:
        for tmp, _ in temps:
            Path(tmp).unlink(missing_ok=True)
        if isinstance(e, OSError):
            raise OutputError(f"could not write {target}: {e.strerror or e}") from None
        raise


def write_result(df: pd.DataFrame, path: str | os.PathLike, fmt: str, overwrite: bool = False) -> Path:
    """Write ``df`` to ``path`` atomically; refuse to replace an existing file unless ``overwrite``."""
    target = Path(path)
    check_targets([target], overwrite)
    fd, tmp = _temp_beside(target)
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
