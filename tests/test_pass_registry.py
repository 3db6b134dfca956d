"""The declared passes: one module per pass kind, the plan rules in order, and the builder contexts
of every pass meeting the interface their catalog entries write against (catalog/contexts.py).

These are checks of the project's own structure (no outside source is needed for them); what the
passes compute is checked against the numpy reference in the engine tests.
"""

from __future__ import annotations

import inspect

import pytest
from sqlglot import exp

import uneven
from uneven.catalog import MEASURES, contexts
from uneven.catalog.spec import PassKind
from uneven.compiler import plan
from uneven.compiler.passes import centred, entity, moment, ordered, paired, ranked, refine, rows, subgroup
from uneven.compiler.passes.registry import MODULES, PASSES


def test_every_kind_has_exactly_one_module():
    assert sorted(PASSES) == sorted(PassKind)
    assert len(MODULES) == len(PASSES)
    for kind, module in PASSES.items():
        assert module.KIND is kind and callable(module.lower)


def test_name_prefixes_are_distinct_and_only_the_moment_pass_has_none():
    prefixes = [m.PREFIX for m in MODULES if m.PREFIX is not None]
    assert len(prefixes) == len(set(prefixes))
    assert [m.KIND for m in MODULES if m.PREFIX is None] == [PassKind.MOMENT]


def test_every_catalog_pass_is_registered():
    named = set()
    for m in MEASURES.values():
        named.update(m.passes if isinstance(m.passes, tuple) else (m.passes,))
    assert named <= set(PASSES) and PassKind.ORDERED in named


def test_plan_rules_run_in_their_declared_order():
    assert plan.PLAN_RULES == (plan.share_passes, plan.route_refine, plan.route_stream, plan.fuse_centred,
                               plan.choose_variants, plan.choose_stream_form, plan.choose_summary_form)


def test_generated_names_follow_the_registry_prefixes():
    sql = uneven.compile("SELECT g, gini(x), top_share(x, 0.1), hhi(x, e), cv(x) FROM t GROUP BY g", ordered="window")
    for name in ("_uv_ord_1", "_uv_ent_1", "_uv_agg_1"):
        assert name in sql
    assert "_uv_cen_" not in sql  # cv rides on the ordered pass of the same value (plan.fuse_centred)


def test_pass_kinds_read_as_their_names():
    # catalog entries write passes="ordered"; explain shows the kind as plain text
    assert PassKind("ordered") is PassKind.ORDERED and f"{PassKind.REFINE}" == "refine"
    shown = uneven.explain("SELECT gini(x) FROM (VALUES (1.0), (2.0)) t(x)", ordered="window").passes[0]["kind"]
    assert shown == "ordered" and type(shown) is str


def declares(obj, shape) -> bool:
    """Every public member of the interface is there, looked up without evaluating a property (some
    members register columns when read, and the macros' contexts refuse some with an error)."""
    members = [n for n in dir(shape) if not n.startswith("_")]
    for name in members:
        try:
            inspect.getattr_static(obj, name)
        except AttributeError:
            return False
    return bool(members)


def _main():
    return moment.MainAggregate("_uv_agg_1", [])


@pytest.mark.parametrize("make, shape", [
    (lambda: moment.MomentContext(_main(), exp.column("x"), None), contexts.MomentSums),
    (lambda: centred.CentredContext(_main(), exp.column("x"), None, None, "_uv_cen_1"), contexts.CentredSums),
    (lambda: ordered.OrderedContext(weighted=True), contexts.SortedRows),
    (lambda: ordered.OrderedContext(weighted=True), contexts.GroupSums),
    (lambda: ordered.OrderedContext(weighted=False), contexts.Centred),  # centred calls fused onto it
    (lambda: rows.RowContext(weighted=False, name="_uv_lin_1"), contexts.SortedRows),
    (lambda: rows.RowContext(weighted=False, name="_uv_lin_1"), contexts.GroupSums),
    (lambda: refine.RefineContext(weighted=True, name="_uv_ref_1"), contexts.CutMasses),
    (lambda: entity.EntityContext(), contexts.EntityTotals),
    (lambda: subgroup.SubgroupContext(weighted=True), contexts.SubgroupSums),
    (lambda: ranked.RankedContext(weighted=True, nvalues=2), contexts.RankedTotals),
    (lambda: paired.PairedContext(weighted=False), contexts.PairedGinis),
], ids=["moment", "centred", "ordered", "ordered-sums", "ordered-centred", "rows", "rows-sums", "refine", "entity", "subgroup", "ranked", "paired"])
def test_pass_contexts_meet_their_declared_interface(make, shape):
    assert declares(make(), shape)
    assert isinstance(make(), shape)


def test_macro_contexts_meet_the_same_interfaces():
    from uneven.duckdb_functions import aggregate
    assert declares(aggregate.OrderedListContext(weighted=True), contexts.SortedRows)
    assert declares(aggregate.EntityListContext(), contexts.EntityTotals)
    assert not declares(aggregate.OrderedListContext(weighted=True), contexts.GroupSums)  # no sum, min_x
    assert not declares(entity.EntityContext(), contexts.SortedRows)
