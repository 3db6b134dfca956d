"""Write a report and its side files all or nothing: each to a temporary file beside its target,
then renamed; an existing file is kept unless replacing is asked for."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from ineqsql.errors import OutputError


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def check_targets(paths: list[Path], overwrite: bool) -> None:
    for p in paths:
        if p.exists() and not overwrite:
            raise OutputError(f"{p} already exists; pass --force to replace it")
        if not p.parent.exists():
            raise OutputError(f"the folder {p.parent} does not exist")


def write_all(files: dict[Path, str | bytes], overwrite: bool = False) -> None:
    check_targets(list(files), overwrite)
    temps: list[tuple[str, Path]] = []
    try:
        for target, content in files.items():
            fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
            temps.append((tmp, target))
            os.chmod(tmp, 0o666 & ~_umask())  # as an ordinary new file (mkstemp makes it private)
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
