"""The numpy side of the streamed ranked pass (concentration indices, Kakwani, Reynolds–Smolensky):
per-group sums over rows sorted by (keys, ranking value), arriving in Arrow batches that may split a
group or a run of tied ranking values anywhere.

The window plan (compiler/passes/ranked.py) groups the rows into tie groups (keys, ranking value),
takes the running weight c_g to the end of each tie group and sums, per value v,
Σ_g Y_g (2c_g − W_g) and Σ_g Y_g (Y_g = Σ w·v over the tie group, W_g its weight): every row of a
tie group gets the mid-rank, (weight strictly below + half the tie group's weight) / W. Here the
same sums are formed per batch:

- tie groups start where the group keys or the ranking value change (NaN equals NaN, as in
  GROUP BY); the last tie group of a batch stays open, since its weight (and so every row's
  mid-rank) is known only when another value or group arrives. Its partial sums (W_g, Y_g per
  value) and the weight before it carry into the next batch as one leading row, so the batch's
  own arithmetic closes it like any other tie group;
- c_g from a compensated prefix sum of the tie groups' weights (engine/streamsums.prefix_sums);
- each value enters Y_g as v − m, m the value of the group's first row: the numerator
  Σ_g Y_g (2c_g − W_g − W) is unchanged by the shift (Σ_g W_g (2c_g − W_g − W) = 0), and a group
  of large nearly equal values keeps its digits. Its total T = m·W + Σ_g Y_g.

The quantities (``Need``s read by catalog/kernels_ranked.py), per group and value index i (0: the
ranking value, 1 …: the other value arguments in the pass's order): ``rank_W`` the weight,
``rank_a`` Σ_g Y_g (2c_g − W_g) and ``rank_b`` Σ_g Y_g on v − m, ``rank_m`` m, ``rank_min`` and
``rank_max`` the smallest and largest value.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from uneven.catalog.kernels import Need
from uneven.engine.streamsums import key_changes, prefix_sums, same_keys

PER_VALUE = ("rank_a", "rank_b", "rank_m", "rank_min", "rank_max")


def ranked_needs(nvalues: int) -> list[Need]:
    """Every quantity the state gives, for a pass of ``nvalues`` value columns."""
    return [Need("rank_W")] + [Need(name, float(i)) for i in range(nvalues) for name in PER_VALUE]


def value_columns(nvalues: int) -> list[str]:
    """The rows query's value columns: the ranking value first (the sort's), then the others."""
    return ["_uv_x"] + [f"_uv_v{i}" for i in range(1, nvalues)]


def _steps(x: np.ndarray) -> np.ndarray:
    """changed[i − 1] for i ≥ 1: x[i] differs from x[i − 1] (NaN equals NaN, as GROUP BY has it)."""
    with np.errstate(invalid="ignore"):
        return (x[1:] != x[:-1]) & ~(np.isnan(x[1:]) & np.isnan(x[:-1]))


class RankedState:
    """The open group (its sums and its open tie group) carried from one batch to the next, and the
    finished groups; the interface engine/stream.py reads of a state (``feed``, ``finish``,
    ``started``, ``key_parts``, ``unsorted``, ``totals``)."""

    def __init__(self, nvalues: int, weighted: bool):
        self.nvalues, self.weighted = nvalues, weighted
        self.totals = self.totals_t = self.totals_n = None  # (no totals query: W is known at the group's end)
        self.started = 0
        self.key_parts: list[pa.RecordBatch] = []
        self.unsorted = False
        self.last_key: pa.Table | None = None  # the last row's keys (the open group's)
        self.open: dict | None = None  # the open group: a, b, lo, hi, m (one per value); its open tie group
        self.done: dict[str, list[np.ndarray]] = {name: [] for name in ("W", "a", "b", "m", "lo", "hi")}

    def feed(self, batch: pa.RecordBatch, key_names: list[str]) -> None:
        n = batch.num_rows
        if n == 0:
            return
        keys = batch.select(key_names)
        starts = key_changes(list(keys.columns), n)
        continues = self.open is not None and (not key_names or (
            self.last_key is not None and same_keys(pa.Table.from_batches([keys.slice(0, 1)]), self.last_key)))
        if not continues:
            self._close()
        o = self.open  # the open group this batch goes on with, or None
        if key_names:
            self.last_key = pa.Table.from_batches([keys.take(pa.array([n - 1]))])
        new = np.flatnonzero(starts if continues else np.concatenate(([True], starts[1:])))
        if len(new):
            self.key_parts.append(keys.take(pa.array(new)))
        self.started += len(new)

        x = batch.column("_uv_x").to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
        vals = [x] + [batch.column(c).to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
                      for c in value_columns(self.nvalues)[1:]]
        w = (batch.column("_uv_w").to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
             if self.weighted else np.ones(n))
        with np.errstate(invalid="ignore"):
            down = x[1:] < x[:-1]
            if (down & ~starts[1:]).any() or (o is not None and x[0] < o["tie_x"]):
                self.unsorted = True

        # the rows of the batch, after one leading row standing for the open group's open tie group
        lead = 1 if continues else 0
        gs = np.concatenate(([True], starts[1:])) if not continues else np.concatenate(([True, False], starts[1:]))
        if o is not None:
            X = np.concatenate(([o["tie_x"]], x))
            Wr = np.concatenate(([o["tie_w"]], w))
            V = [np.concatenate(([o["m"][i]], v)) for i, v in enumerate(vals)]
        else:
            X, Wr, V = x, w, vals
        N = n + lead
        seg = np.flatnonzero(gs)
        nseg = len(seg)
        lens = np.diff(np.append(seg, N))
        m_seg = np.stack([v[seg] for v in V])  # (values, segments): each group's first value
        ts = gs.copy()
        ts[1:] |= _steps(X)
        tstart = np.flatnonzero(ts)
        nt = len(tstart)
        Wt = np.add.reduceat(Wr, tstart)
        Yt = np.empty((self.nvalues, nt))
        for i, v in enumerate(V):
            y = Wr * (v - (m_seg[i, 0] if nseg == 1 else np.repeat(m_seg[i], lens)))
            if o is not None:
                y[0] = o["tie_y"][i]  # the open tie group's partial Σ w·(v − m)
            Yt[i] = np.add.reduceat(y, tstart)
        tseg = np.searchsorted(seg, tstart, side="right") - 1
        tlen = np.bincount(tseg, minlength=nseg)
        first_tie = np.concatenate(([0], np.cumsum(tlen)[:-1]))
        # c_g: the running weight to each tie group's end, per group, compensated (hi + lo)
        before_hi, before_lo = (o["c_hi"], o["c_lo"]) if o is not None else (0.0, 0.0)
        hi, lo = prefix_sums(Wt, before_hi if before_lo == 0.0 else np.inf)
        if lo is None:
            lo = np.zeros(nt)
        if nseg > 1:  # each group's running sum from its own first tie group
            prior = np.where(first_tie > 0, first_tie - 1, 0)
            hi = hi - np.repeat(np.where(first_tie > 0, hi[prior], 0.0), tlen)
            lo = lo - np.repeat(np.where(first_tie > 0, lo[prior], 0.0), tlen)
        if continues:
            hi[:tlen[0]] += before_hi
            lo[:tlen[0]] += before_lo
        c = hi + lo
        # every tie group but the batch's last is closed: its weight is whole
        closed = nt - 1
        twice = 2.0 * c[:closed] - Wt[:closed]
        a = np.empty((self.nvalues, nseg))
        b = np.empty((self.nvalues, nseg))
        for i in range(self.nvalues):
            a[i] = np.bincount(tseg[:closed], weights=Yt[i, :closed] * twice, minlength=nseg)
            b[i] = np.bincount(tseg[:closed], weights=Yt[i, :closed], minlength=nseg)
        lo_v = np.stack([np.minimum.reduceat(v, seg) for v in V])
        hi_v = np.stack([np.maximum.reduceat(v, seg) for v in V])
        if o is not None:
            a[:, 0] += o["a"]
            b[:, 0] += o["b"]
            lo_v[:, 0] = np.fmin(lo_v[:, 0], o["lo"])
            hi_v[:, 0] = np.fmax(hi_v[:, 0], o["hi"])
        last_tie = first_tie + tlen - 1  # each group's last tie group (closed for all but the last group)
        if nseg > 1:
            done = slice(0, nseg - 1)
            self.done["W"].append(c[last_tie[done]])
            for name, arr in (("a", a), ("b", b), ("m", m_seg), ("lo", lo_v), ("hi", hi_v)):
                self.done[name].append(arr[:, done].T.copy())
        k = nt - 1  # the open tie group: its weight before it is the previous tie group's end, in its group
        if tlen[-1] > 1:
            c_hi, c_lo = float(hi[k - 1]), float(lo[k - 1])
        else:  # the group's first tie group in this batch: the weight carried into it, if any
            c_hi, c_lo = (before_hi, before_lo) if continues and nseg == 1 else (0.0, 0.0)
        self.open = {"a": a[:, -1].copy(), "b": b[:, -1].copy(), "m": m_seg[:, -1].copy(),
                     "lo": lo_v[:, -1].copy(), "hi": hi_v[:, -1].copy(), "tie_x": float(X[tstart[k]]),
                     "tie_w": float(Wt[k]), "tie_y": Yt[:, k].copy(),
                     "c_hi": c_hi, "c_lo": c_lo}

    def _close(self) -> None:
        """The open group ended: its open tie group closes, and the group joins the finished ones."""
        o = self.open
        if o is None:
            return
        c = (o["c_hi"] + o["tie_w"]) + o["c_lo"]
        self.done["W"].append(np.array([c]))
        self.done["a"].append((o["a"] + o["tie_y"] * (2.0 * c - o["tie_w"]))[None, :])
        self.done["b"].append((o["b"] + o["tie_y"])[None, :])
        for name in ("m", "lo", "hi"):
            self.done[name].append(o[name][None, :])
        self.open = None

    def finish(self) -> tuple[dict[Need, np.ndarray], np.ndarray]:
        """The quantities of every group, in order, and each group's smallest ranking value."""
        self._close()
        cat = {name: np.concatenate(parts) if parts else np.zeros((0, self.nvalues))
               for name, parts in self.done.items()}
        W = cat["W"] if self.done["W"] else np.zeros(0)
        out: dict[Need, np.ndarray] = {Need("rank_W"): W}
        for i in range(self.nvalues):
            for name, key in zip(PER_VALUE, ("a", "b", "m", "lo", "hi")):
                out[Need(name, float(i))] = cat[key][:, i]
        return out, cat["m"][:, 0]
