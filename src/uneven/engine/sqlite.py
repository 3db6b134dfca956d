"""What compiled SQL needs from a SQLite connection (Python's sqlite3).

SQL compiled for SQLite calls ``uneven_raise(message)`` where a query must stop (a negative
weight, a strict measure that is undefined), since SQLite has no raising function in SQL; and
``ln``, ``exp``, ``power``, ``sqrt``, ``ceil`` (built in when SQLite is compiled with its math
functions, as Python's usually is). ``install_sqlite_functions(con)`` registers the first and any
of the others the build lacks.

Python's sqlite3 reports an exception inside a registered function only as "user-defined function
raised exception"; the message is kept and ``raised_message(con)`` gives it back.
"""

from __future__ import annotations

import hashlib
import math
import sqlite3

from uneven.compiler.dialects.sqlite import HASH_FUNCTION, RAISE_FUNCTION

_MESSAGES: dict[int, str] = {}


def raised_message(con: sqlite3.Connection) -> str | None:
    """The message of the last ``uneven_raise`` call on ``con`` since the last time asked (None
    when there was none)."""
    return _MESSAGES.pop(id(con), None)


def _nullable(fn):
    def call(*args):
        if any(a is None for a in args):
            return None
        try:
            return fn(*(float(a) for a in args))
        except (ValueError, OverflowError, ZeroDivisionError):
            return None  # outside the domain: NULL, as SQLite's own math functions do
    return call


# name → (arguments, Python function, a probe query that needs it)
MATH = {"ln": (1, math.log, "SELECT ln(2.0)"), "exp": (1, math.exp, "SELECT exp(1.0)"),
        "power": (2, math.pow, "SELECT power(2.0, 0.5)"), "sqrt": (1, math.sqrt, "SELECT sqrt(2.0)"),
        "ceil": (1, lambda v: float(math.ceil(v)), "SELECT ceil(1.5)")}


def _has(con: sqlite3.Connection, probe: str) -> bool:
    try:
        con.execute(probe).fetchone()
        return True
    except sqlite3.OperationalError:
        return False


def hash64(*parts) -> int:
    """``uneven_hash(a, b, …)``: a signed 64-bit hash of the values' text (BLAKE2b, 8 bytes), for the
    bootstrap's replicate draws (SQLite has no hash function of its own)."""
    text = "|".join("" if p is None else repr(p) for p in parts).encode()
    return int.from_bytes(hashlib.blake2b(text, digest_size=8).digest(), "little", signed=True)


def install_sqlite_functions(con: sqlite3.Connection) -> list[str]:
    """Register ``uneven_raise``, ``uneven_hash`` and the math functions the SQLite build lacks;
    return their names."""
    key = id(con)

    def raise_(message):
        _MESSAGES[key] = str(message)
        raise ValueError(str(message))

    added = [RAISE_FUNCTION]
    con.create_function(RAISE_FUNCTION, 1, raise_)
    con.create_function(HASH_FUNCTION, -1, hash64, deterministic=True)
    added.append(HASH_FUNCTION)
    for name, (nargs, fn, probe) in MATH.items():
        if not _has(con, probe):
            con.create_function(name, nargs, _nullable(fn), deterministic=True)
            added.append(name)
    return added
