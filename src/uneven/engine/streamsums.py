"""The numpy side of the streamed ordered pass: per-group quantities over rows sorted by (keys, x),
arriving in Arrow batches that may split a group (or a run of tied values) anywhere.

Per batch: group boundaries from the key columns (a NULL key is a group of its own; NaN equals NaN,
as in GROUP BY), the running weight C_i from a compensated prefix sum (each step's rounding error
recovered exactly by the two-sum identity and summed apart), and per-segment sums by
``np.add.reduceat``. The last group of a batch stays open: its running weight and its partial sums
are carried into the next batch. What a kernel reads (catalog/kernels.py) is what is computed: the
kernels are first run on a ``Recorder``.

Digits: x enters every sum as d = x − m, m the group's smallest value (its first row), so the
sums of a group of large nearly equal values keep their digits; T = m·W + Σ w·d.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from uneven.catalog.kernels import Need
from uneven.engine import streamcuts, streamdesign_cuts, streamse
from uneven.engine.streamdesign import DESIGN_COLUMNS, DesignSums

# the quantities and how two partial values of one group combine (the earlier one first)
_SUM, _MIN, _LAST = "sum", "min", "last"


def _combine(kind, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    if callable(kind):  # a merge of its own (engine/streamse.merge_rows: Chan's pairwise update)
        return kind(a, b)
    if kind == _SUM:
        return a + b
    if kind == _MIN:
        return np.minimum(a, b)
    return b


SCALE = 2.0 ** -512  # the scaled form's factor (catalog/scaling.py)
_KIND: dict[str, Any] = {"W": _LAST, "n": _SUM, "gini_a": _SUM, "gini_b": _SUM, "gini_a_s": _SUM, "gini_b_s": _SUM,
         "below": _SUM, "above": _SUM,
         "quantile": _MIN, "xmax": _LAST, "m": _LAST, "chunk": _LAST, "curve": _SUM, "curve_a": _LAST,
         "gini_design": _LAST, "design_sd": _LAST}  # (gini_design: engine/streamdesign.py builds each row)
_KIND.update(streamse.KINDS)  # the cut-based standard errors' sums
_KIND.update(streamdesign_cuts.KINDS)  # … and with a survey design


class GroupValues:
    """The quantities of every group, as the kernels read them (NaN where a group has none)."""

    def __init__(self, values: dict[Need, np.ndarray], m: np.ndarray, totals: np.ndarray | None = None):
        self.values, self.m, self.totals = values, m, totals  # totals: W per group from the totals query

    def _get(self, need: Need) -> np.ndarray:
        return self.values[need]

    @property
    def W(self):
        return self._get(Need("W"))

    @property
    def n(self):
        return self._get(Need("n"))

    @functools.cached_property
    def T(self):  # (once: several kernels read it)
        with np.errstate(over="ignore", invalid="ignore"):
            t = self.m * self.W + self._get(Need("gini_b"))
        return np.where(np.isfinite(t), t, np.nan)

    @property
    def gini_ratio(self):
        """(num / W) / T: divided by W, then by T, as the window plan does (W·T may overflow where
        the ratio does not); the form on x·2⁻⁵¹² where the plain one is not finite (those groups only)."""
        W = self.W
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            plain = (self._get(Need("gini_a")) - W * self._get(Need("gini_b"))) / W / self.T
            bad = ~np.isfinite(plain)
            if not bad.any():
                return plain
            Wb = W[bad]
            t_s = self.m[bad] * SCALE * Wb + self._get(Need("gini_b_s"))[bad]
            plain[bad] = (self._get(Need("gini_a_s"))[bad] - Wb * self._get(Need("gini_b_s"))[bad]) / Wb / t_s
        return plain

    def below(self, p: float):
        return self._get(Need("below", float(p)))

    def above(self, p: float):
        return self._get(Need("above", float(p)))

    def quantile(self, p: float):
        q = self._get(Need("quantile", float(p)))
        return np.where(np.isinf(q), self._get(Need("xmax")), q)

    @property
    def xmax(self):
        return self._get(Need("xmax"))

    def curve(self, k: int) -> np.ndarray:
        """(groups, k+1): Σ_i x_i·clamp(t_j − C_{i−1}, 0, w_i) at t_j = (j/k)·W, from the sums on
        d = x − m (``curve_contributions``) plus m·Σ clamp(…) = m·min(t_j, C_n)."""
        assert self.totals is not None  # a curve's pass reads the totals first
        held = self._get(Need("curve", float(k)))
        targets = (np.arange(k + 1) / k)[None, :] * self.totals[:, None]
        with np.errstate(over="ignore", invalid="ignore"):
            return held + self.m[:, None] * np.minimum(targets, self.W[:, None])

    @property
    def gini_design(self):
        """(the fewest units of any stratum, v) per group: the survey design's variance of the Gini's
        score totals (engine/streamdesign.py)."""
        rows = self._get(Need("gini_design"))
        return rows[:, 0], rows[:, 1]

    def read(self, need: Need) -> np.ndarray:
        """A quantity of a kernel module of its own (catalog/kernels_se.py)."""
        return self._get(need)

    def chunk(self, kernel, params: tuple):
        states = self._get(Need("chunk", kernel=kernel, params=tuple(params)))
        out = [kernel.finish(state, *params) for state in states]
        return np.array([np.nan if v is None else float(v) for v in out], dtype=np.float64)


EXACT_BELOW = 2.0 ** 53  # every integer up to 2^53 is a double: sums of integers below it are exact


def prefix_sums(w: np.ndarray, start: float = 0.0) -> tuple[np.ndarray, np.ndarray | None]:
    """The running sums of the weights ``w`` (non-negative: the input policy stops a negative one) as
    (hi, lo), hi + lo to a few units of the last place; lo is None where hi is exact as it is: the
    weights are integers and ``start`` (the running weight carried into them; inf when it is not
    an exact integer) plus their sum stays below 2^53, so no step of the plain cumsum rounds (a
    cumsum of integers is exact while every partial sum is an integer of at most 53 bits)."""
    hi = np.cumsum(w)
    if (len(w) and start + hi[-1] < EXACT_BELOW and float(start).is_integer()
            and (w[:64] == np.floor(w[:64])).all() and (w == np.floor(w)).all()):  # (fractions: seen at once)
        return hi, None
    return compensated_prefix(w, hi)


def compensated_prefix(v: np.ndarray, hi: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(hi, lo): hi the running sums as np.cumsum gives them, lo the running sum of each step's exact
    rounding error (two-sum: a + b = s + e exactly for s = fl(a + b)), so hi + lo is the prefix sum to
    a few units of the last place whatever the number of rows (``hi``: np.cumsum(v), when known)."""
    hi = np.cumsum(v) if hi is None else hi
    err = np.zeros_like(hi)  # the first step, 0 + v[0], is exact
    if len(hi) > 1:  # in place, two arrays for five passes: s = prev + v rounded, bp = s − prev
        prev, s, e = hi[:-1], hi[1:], err[1:]
        bp = np.subtract(s, prev)
        np.subtract(s, bp, out=e)
        np.subtract(prev, e, out=e)  # prev − (s − bp)
        np.subtract(v[1:], bp, out=bp)  # v − bp
        np.add(e, bp, out=e)
    return hi, np.cumsum(err, out=err)


def _same(a, b) -> bool:
    if a is None or b is None:
        return a is None and b is None
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    return bool(a == b)


def same_keys(a: pa.Table, b: pa.Table) -> bool:
    """The same key rows in the same order (NULL equals NULL, NaN equals NaN)."""
    if a.num_rows != b.num_rows or a.num_columns != b.num_columns:
        return False
    if a.equals(b):
        return True
    return all(_same(u, v) for ca, cb in zip(a.columns, b.columns) for u, v in zip(ca.to_pylist(), cb.to_pylist()))


def key_changes(cols: list[pa.Array], n: int) -> np.ndarray:
    """changed[i] for i ≥ 1: row i's keys differ from row i−1's (NULL equals NULL, NaN equals NaN)."""
    changed = np.zeros(n, dtype=bool)
    for col in cols:
        if n < 2:
            break
        if pa.types.is_integer(col.type) and col.null_count == 0:  # the common key: numpy, no copy
            k = col.to_numpy()
            changed[1:] |= k[1:] != k[:-1]
            continue
        a, b = col.slice(1), col.slice(0, n - 1)
        try:
            ne = pc.fill_null(pc.not_equal(a, b), False)
        except pa.ArrowNotImplementedError:  # lists, structs …: compared as Python values
            values = col.to_pylist()
            changed[1:] |= np.array([not _same(values[i], values[i - 1]) for i in range(1, n)], dtype=bool)
            continue
        if pa.types.is_floating(col.type):
            ne = pc.and_(ne, pc.invert(pc.and_(pc.fill_null(pc.is_nan(a), False), pc.fill_null(pc.is_nan(b), False))))
        nulls = pc.not_equal(pc.is_null(a), pc.is_null(b))
        changed[1:] |= np.asarray(pc.or_(ne, nulls).to_numpy(zero_copy_only=False), dtype=bool)
    return changed


@dataclass
class StreamState:
    """The open group carried from one batch to the next, and the finished groups."""

    needs: list[Need]
    weighted: bool
    totals: np.ndarray | None = None  # W per group, in the stream's group order (when a need reads it)
    totals_t: np.ndarray | None = None  # T and n per group (for user kernels' start)
    totals_n: np.ndarray | None = None
    started: int = 0  # groups started so far
    last_key: tuple | None = None  # the keys of the last row seen
    carry_hi: float = 0.0  # running weight of the open group (hi + lo)
    carry_lo: float = 0.0
    open: dict | None = None  # partial quantities of the open group (and "m": its smallest value)
    done: dict = field(default_factory=dict)  # quantity -> list of arrays of finished groups
    key_parts: list = field(default_factory=list)  # the rows that start a group (Arrow tables)
    last_x: float = -math.inf  # the last value seen (the open group's), for the order check
    unsorted: bool = False  # a value below its predecessor within a group was seen
    designs: dict = field(default_factory=dict)  # Need -> DesignSums (a survey design's per-PSU state)
    design_columns: dict = field(default_factory=dict)  # the batch's stratum and PSU columns

    def feed(self, batch: pa.RecordBatch, key_names: list[str]) -> None:
        n = batch.num_rows
        if n == 0:
            return
        keys = [batch.column(k) for k in key_names]
        starts_mask = key_changes(keys, n)
        first = tuple(k[0].as_py() for k in keys)
        carried = self.open
        continues = carried is not None and all(_same(a, b) for a, b in zip(first, self.last_key or ()))
        starts_mask[0] = not continues
        if not continues:
            self._close()
        self.last_key = tuple(k[n - 1].as_py() for k in keys)
        seg = np.flatnonzero(starts_mask)
        if continues:
            seg = np.concatenate(([0], seg))
        new = np.flatnonzero(starts_mask)
        if len(new):
            self.key_parts.append(batch.select(key_names).take(pa.array(new)))
        nseg = len(seg)
        lens = np.diff(np.append(seg, n))  # rows per segment (seg[0] is 0: the batch starts a segment)

        def spread(per_segment: np.ndarray):  # each segment's value on each of its rows
            return per_segment[0] if nseg == 1 else np.repeat(per_segment, lens)
        # the group index of each segment (the first may be the open group)
        gidx = self.started - (1 if continues else 0) + np.arange(nseg)
        self.started += len(new)

        x = batch.column("_uv_x").to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
        self.design_columns = {c: batch.column(c) for c in DESIGN_COLUMNS if c in batch.schema.names}
        steps = x[1:] < x[:-1]  # (a step down is allowed only where a group starts: checked where there is one)
        if (steps.any() and (steps & ~starts_mask[1:]).any()) or (continues and x[0] < self.last_x):
            self.unsorted = True
        self.last_x = float(x[-1])
        m_seg = x[seg].copy()
        if carried is not None and continues:
            m_seg[0] = carried["m"]
        d = x - spread(m_seg)

        if self.weighted:
            w = batch.column("_uv_w").to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
            carry_hi, carry_lo = (self.carry_hi, self.carry_lo) if continues else (0.0, 0.0)
            hi, lo = prefix_sums(w, carry_hi if carry_lo == 0.0 else math.inf)
            restart = nseg > 1 and not math.isfinite(hi[-1])  # a group's overflow must not reach the next
            if restart:
                hi, lo = segmented_prefix(w, lens)
            c_hi = hi - spread(np.where(seg > 0, hi[seg - 1], 0.0)) if nseg > 1 and not restart else hi
            if continues:
                c_hi[:lens[0]] += carry_hi  # the open group's rows come first
            if lo is None:  # integers below 2^53: every running weight is exact as it is
                c = c_hi
                self.carry_hi, self.carry_lo = float(c_hi[-1]), 0.0
            else:
                c_lo = lo - spread(np.where(seg > 0, lo[seg - 1], 0.0)) if nseg > 1 and not restart else lo
                if continues:
                    c_lo[:lens[0]] += carry_lo
                c = c_hi + c_lo
                self.carry_hi, self.carry_lo = float(c_hi[-1]), float(c_lo[-1])
        else:
            w = None
            rows = np.arange(1, n + 1, dtype=np.float64)
            c = rows - spread(seg.astype(np.float64)) if nseg > 1 else rows
            if continues:
                c[:lens[0]] += self.carry_hi
            self.carry_hi, self.carry_lo = float(c[-1]), 0.0

        part = self._segment_values(x, d, w, c, seg, gidx, m_seg, carried if continues else None)
        part["m"] = m_seg
        if carried is not None and continues:
            for key, arr in part.items():
                if key != "m":
                    arr[0] = _combine(_KIND[key if isinstance(key, str) else key.name], carried[key], arr[0])
        for key, arr in part.items():
            self.done.setdefault(key, []).append(arr[:-1])
        self.open = {key: arr[-1] for key, arr in part.items()}

    def _segment_values(self, x, d, w, c, seg, gidx, m_seg, carried) -> dict:
        out: dict = {}
        shared: dict = {"m": m_seg}  # the batch's row terms of the standard errors (engine/streamse.py)
        wd = d if w is None else w * d
        ends = np.append(seg[1:], len(x)) - 1
        cuts = [need for need in self.needs if need.name in streamcuts.CUT_NAMES]
        if cuts and self.totals is not None:  # every cut at once (engine/streamcuts.py) where the sums are finite
            W = self.totals[gidx]
            found = streamcuts.cut_parts(cuts, x, d, wd, w, c, seg, ends + 1 - seg, W, m_seg) \
                if streamcuts.applies(c, W) else None
            out.update(found or {})
        for need in self.needs:
            if need in out:
                continue
            if need.name == "W":  # the running weight at the segment's last row (the open group's carry included)
                out[need] = c[ends].copy()
            elif need.name == "n":
                out[need] = np.diff(np.append(seg, len(x))).astype(np.float64)
            elif need.name == "gini_a":
                twice = 2.0 * c - (w if w is not None else 1.0)
                out[need] = np.add.reduceat(wd * twice, seg)
            elif need.name == "gini_b":
                out[need] = np.add.reduceat(wd, seg)
            elif need.name in ("gini_a_s", "gini_b_s"):
                plain = out[Need(need.name[:-2])]  # recorded before it (kernels.Recorder.gini_ratio)
                if np.isfinite(plain).all():
                    out[need] = plain * SCALE  # exact: a power of two (underflow only where unused)
                    continue
                ds = x * SCALE - m_seg[np.cumsum(np.bincount(seg, minlength=len(x)) > 0) - 1] * SCALE
                wds = ds if w is None else w * ds
                out[need] = np.add.reduceat(wds * (2.0 * c - (w if w is not None else 1.0)), seg) \
                    if need.name == "gini_a_s" else np.add.reduceat(wds, seg)
            elif need.name == "xmax":
                out[need] = x[ends].copy()
            elif need.name == "chunk":
                out[need] = self._chunks(need, x, w, c, seg, gidx, carried)
            elif need.name == "curve":
                assert self.totals is not None and need.p is not None  # a curve reads the totals first
                a_key = Need("curve_a", need.p)
                out[need], out[a_key] = curve_contributions(
                    int(need.p), d, w, c, seg, self.totals[gidx], None if carried is None else int(carried[a_key]))
            elif need.name in streamse.NEEDS:
                assert self.totals is not None and self.totals_n is not None  # read with the totals first
                out.update(streamse.segment_values(need, x, d, w, c, seg, self.totals[gidx], self.totals_n[gidx],
                                                   carried, segmented_prefix, shared,
                                                   None if self.totals_t is None else self.totals_t[gidx]))
            elif need.name in streamdesign_cuts.NEEDS:  # (after the rest: their coefficients read it, below)
                continue
            elif need.name == "gini_design":  # per (stratum, PSU) sums of the row terms: engine/streamdesign.py
                sd_key = Need("design_sd")
                assert self.totals is not None  # the rank term reads W (kernels.TOTAL_NEEDS)
                wt = np.repeat(self.totals[gidx], np.diff(np.append(seg, len(x))))
                terms, out[sd_key] = gini_terms(d, w, c, seg, None if carried is None else carried[sd_key], wt)
                design = self.designs.setdefault(need, DesignSums())
                out[need] = design.feed(terms, c, m_seg, seg, self.design_columns, carried is not None)
            else:
                assert self.totals is not None
                segs = np.diff(np.append(seg, len(x)))
                wt = np.repeat(self.totals[gidx], segs)
                ww = w if w is not None else 1.0
                assert need.p is not None  # a cut (quantile, below, above) always has its p
                p = float(need.p)
                if need.name == "quantile":
                    with np.errstate(divide="ignore", invalid="ignore"):
                        reached = c / wt >= p
                    out[need] = np.minimum.reduceat(np.where(reached, x, np.inf), seg)
                    continue
                if need.name == "below":
                    room = np.clip(p * wt - (c - ww), 0.0, ww)
                else:
                    room = np.clip(c - (1.0 - p) * wt, 0.0, ww)
                # Σ x·room = Σ d·room + m·Σ room: the large common part apart
                out[need] = np.add.reduceat(room * d, seg) + m_seg * np.add.reduceat(room, seg)
        designed = [need for need in self.needs if need.name in streamdesign_cuts.NEEDS]
        if designed:  # the cut-based errors' terms per (stratum, PSU), their scores at each group's end
            assert self.totals is not None  # the cuts read W (kernels.TOTAL_NEEDS)
            acc = GroupValues({k: _with_carried(k, v, carried) for k, v in out.items()}, m_seg)
            out.update(streamdesign_cuts.segment_values(designed, acc, x, d, w, c, seg, m_seg, self.totals[gidx],
                                                        carried, self.designs, self.design_columns, segmented_prefix,
                                                        None if self.totals_t is None else self.totals_t[gidx]))
        return out

    def _chunks(self, need: Need, x, w, c, seg, gidx, carried) -> np.ndarray:
        """A user kernel's state per segment: started from the group's totals, or carried on."""
        assert need.kernel is not None and self.totals is not None  # a kernel's pass reads the totals first
        assert self.totals_t is not None and self.totals_n is not None
        kernel, params = need.kernel, need.params
        bounds = np.append(seg, len(x))
        states = np.empty(len(seg), dtype=object)
        for j in range(len(seg)):
            lo, hi = int(bounds[j]), int(bounds[j + 1])
            g = int(gidx[j])
            if j == 0 and carried is not None:
                state = carried[need]
            else:
                state = kernel.start(float(self.totals[g]), float(self.totals_t[g]), int(self.totals_n[g]), *params)
            ww = w[lo:hi] if w is not None else np.ones(hi - lo)
            states[j] = kernel.update(state, x[lo:hi], ww, c[lo:hi], *params)
        return states

    def _close(self) -> None:
        """The open group ended with the last batch: it joins the finished groups."""
        if self.open is not None:
            for key, value in self.open.items():
                if key in self.designs:  # its row is known only now that the group has ended
                    value = self.designs[key].close()
                if isinstance(value, np.ndarray) and value.ndim:  # a row of a 2-D quantity (curve, moments)
                    self.done.setdefault(key, []).append(value[None, :])
                    continue
                one = np.empty(1, dtype=object if isinstance(key, Need) and key.name == "chunk" else np.float64)
                one[0] = value  # a user kernel's state may be any object (a tuple, a dict …)
                self.done.setdefault(key, []).append(one)
            self.open = None

    def finish(self) -> tuple[dict[Need, np.ndarray], np.ndarray]:
        """The quantities of every group, in order, and each group's smallest value."""
        self._close()
        cat = {key: np.concatenate(parts) if parts else np.zeros(0) for key, parts in self.done.items()}
        m = cat.pop("m", np.zeros(0))
        return {need: cat.get(need, np.zeros(0)) for need in self.needs}, m


def _with_carried(key: Need, values: np.ndarray, carried: dict | None) -> np.ndarray:
    """A batch's per-segment quantity with the open group's part combined into its first segment (as
    ``StreamState.feed`` combines them), leaving ``values`` as they are."""
    if carried is None:
        return values
    out = values.copy()
    out[0] = _combine(_KIND[key.name], carried[key], values[0])
    return out


def curve_contributions(k: int, d: np.ndarray, w: np.ndarray | None, c: np.ndarray, seg: np.ndarray,
                        totals: np.ndarray, carried_a: int | None) -> tuple[np.ndarray, np.ndarray]:
    """One batch's part of Σ_i d_i·clamp(t_j − C_{i−1}, 0, w_i), t_j = (j/k)·W, for j = 0 … k: a
    (segments, k+1) array, summed over the batches of a group; and a_end, each segment's a at its
    last row (carried into the next batch).

    a_i = #{j : t_j < C_i} is the number of cuts reached before row i ends (from ceil(k·C_i/W),
    corrected against the targets themselves, so it is exact whatever the rounding: one pass per
    row, not one per cut). Rows sorted by x, so a never decreases within a group; the cuts
    a_{i−1} … a_i − 1 cross row i, which holds (t_j − C_{i−1})·d_i of cut j; every row before it
    is whole: the sum of w·d before row i, read from one cumulative sum over the chunks between
    consecutive crossing rows. A cut the segment does not reach (j ≥ a_end) takes its whole sum;
    a cut crossed in an earlier batch (j < the carried a) takes nothing."""
    n, nseg = len(d), len(seg)
    lens = np.diff(np.append(seg, n))
    ww = np.ones(n) if w is None else w
    wrow = totals[0] if nseg == 1 else np.repeat(totals, lens)
    cuts = np.append(np.arange(k + 1) / k, np.inf)  # p_j = j/k as the window plan's literals; t_{k+1} = ∞
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        guess = np.nan_to_num(np.ceil(c * k / wrow), nan=0.0, posinf=k + 1.0, neginf=0.0)
    a = np.clip(guess, 0, k + 1).astype(np.int64)
    for _ in range(8):  # rounding of k·C/W leaves a within one or two of the count
        with np.errstate(invalid="ignore", over="ignore"):
            up = cuts[a] * wrow < c
            down = (a > 0) & (cuts[np.maximum(a - 1, 0)] * wrow >= c)
        if not (up.any() or down.any()):
            break
        a += up
        a -= down
    before = np.empty(n, dtype=np.int64)
    before[1:] = a[:-1]
    before[seg] = 0
    if carried_a is not None:
        before[0] = carried_a
    cross = np.flatnonzero(a > before)
    count = a[cross] - before[cross]
    total = int(count.sum())
    rows = np.repeat(cross, count)
    cut = np.repeat(before[cross], count) + (np.arange(total) - np.repeat(np.cumsum(count) - count, count))
    seg_of_row = np.repeat(np.arange(nseg), lens)
    # the sum of w·d before each crossing row, per segment: chunks between consecutive break points.
    # A new group's first row crosses cut 0 (t_0 = 0 < C), so the break points are the crossing rows
    # and, when the batch goes on with an open group that crosses nothing at row 0, row 0
    lead = 0 if len(cross) and cross[0] == 0 else 1
    fresh = seg[1:] if carried_a is not None else seg
    simple = bool((a[fresh] > 0).all())
    if simple:
        bp = np.concatenate((np.zeros(lead, dtype=cross.dtype), cross))
    else:  # a running weight that is not a finite number (an overflowing sum): every break point spelled out
        bp = np.union1d(seg, cross)
    chunk = np.add.reduceat(ww * d, bp) if n else np.zeros(0)
    bseg = seg_of_row[bp]
    pos = np.arange(len(bp)) - np.searchsorted(bp, seg)[bseg]
    table = np.zeros((nseg, int(pos.max()) + 1 if len(pos) else 1))
    table[bseg, pos] = chunk
    running = np.cumsum(table, axis=1)
    upto = np.zeros_like(running)
    upto[:, 1:] = running[:, :-1]
    whole = running[:, -1]
    a_end = a[np.append(seg[1:], n) - 1]
    out = np.where(np.arange(k + 1)[None, :] >= a_end[:, None], whole[:, None], 0.0)
    rs = seg_of_row[rows]
    target = cuts[cut] * (totals[rs])
    at = np.repeat(pos[lead:], count) if simple else pos[np.searchsorted(bp, rows)]
    out[rs, cut] = upto[rs, at] + d[rows] * (target - (c[rows] - ww[rows]))
    return out, a_end.astype(np.float64)


def segmented_prefix(v: np.ndarray, lens: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """compensated_prefix restarted at every segment (``lens`` rows each): no segment's sums leak
    into the next one's digits (a difference of batch-wide prefix sums would leave a small group
    after a large one with the large one's rounding)."""
    if len(lens) <= 1:
        return compensated_prefix(v)
    codes = np.repeat(np.arange(len(lens)), lens)
    hi = pd.Series(v).groupby(codes, sort=False).cumsum().to_numpy(copy=True)
    prev = np.empty_like(hi)
    prev[1:] = hi[:-1]
    starts = np.cumsum(lens) - lens
    prev[starts] = 0.0
    bp = hi - prev  # two-sum of prev + v = hi: the exact rounding error of each step
    err = (prev - (hi - bp)) + (v - bp)
    return hi, pd.Series(err).groupby(codes, sort=False).cumsum().to_numpy()


def gini_terms(d: np.ndarray, w: np.ndarray | None, c: np.ndarray, seg: np.ndarray,
               carried_sd: float | None, wt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(rows, 3): the Gini's row terms t1 = w·2((C − W)·d − S_d) (the rank term less 2W·w·d, W the group's
    weight from the totals query, ``wt`` per row: on the upper rows it does not grow with d, where the
    plain rank term and w·d cancel, catalog/kernels_se.gini_score), t2 = w·d, t3 = w, for the survey
    design's per-PSU sums; and the running S_d at each segment's last row (carried into the next batch
    as one double: the compensated sum rounded once, not a sum of per-batch sums)."""
    lens = np.diff(np.append(seg, len(d)))
    ww = np.ones(len(d)) if w is None else w
    wd = ww * d
    if len(seg) <= 16:  # few groups in the batch: one compensated prefix sum per group, no grouped cumsum
        run = np.concatenate([np.add(*compensated_prefix(wd[a:a + k])) for a, k in zip(seg, lens)])
    else:
        run = np.add(*segmented_prefix(wd, lens))
    if carried_sd is not None:
        run[:lens[0]] += carried_sd
    return np.stack((2.0 * ww * ((c - wt) * d - run), wd, ww), axis=1), run[np.append(seg[1:], len(d)) - 1]
