"""The pass registry: every pass kind and the module that lowers it.

A pass module declares ``KIND`` (a ``PassKind``), ``PREFIX`` (the reserved name prefix of its CTEs,
``_uv_<prefix>_N``, or None when it rides on the main aggregate) and
``lower(source, main, plan, name, settings)`` → (its CTEs, call key → result expression).
``settings`` holds the compile options a pass may read (``resolution`` for the summary pass).
"""

from __future__ import annotations

from types import ModuleType

from uneven.catalog.spec import PassKind
from uneven.compiler.passes import (
                                    bootstrap,
                                    centred,
                                    entity,
                                    linearized,
                                    moment,
                                    ordered,
                                    paired,
                                    ranked,
                                    refine,
                                    stream,
                                    subgroup,
                                    summary,
)

MODULES: tuple[ModuleType, ...] = (moment, centred, ordered, refine, stream, entity, subgroup, ranked, paired,
                                   linearized, bootstrap, summary)

PASSES: dict[PassKind, ModuleType] = {module.KIND: module for module in MODULES}

