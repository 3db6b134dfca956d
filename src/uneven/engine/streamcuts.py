"""The cut quantities of one batch of the stream (engine/streamsums.py), all cuts at once.

A cut reads the group's weight W before its rows arrive: ``below(p)`` = Σ x_i·clamp(p·W − C_{i−1}, 0,
w_i), ``above(p)`` = Σ x_i·clamp(C_i − (1−p)·W, 0, w_i) and ``quantile(p)`` = the first x_i with
C_i/W ≥ p (catalog/kernels.py). Summed row by row, each cut costs a handful of passes over the batch;
here every cut of every call is found with one binary search per kind over the batch:

- ``np.searchsorted`` on the running weights finds, in every segment, the row where each target falls;
- the rows between two consecutive cut rows of a segment are summed by one ``np.add.reduceat`` of w·d
  (d = x − m, m the group's smallest value) over all the cut rows of the batch, and the rows before a
  cut (below) or after it (above) by a running sum of those few chunks per segment, from the front or
  from the back (never a difference of two running sums: no digits lost to cancellation);
- the row where the cut falls adds its clamped share, as in the row-by-row form; the weight held,
  Σ clamp(…), is a difference of running weights, and m times it restores x = d + m;
- a quantile is the first row with C_i/W ≥ p, the same comparison as the window plan and the
  row-by-row form (a quantile jumps where it turns true): found near p·W, then moved row by row
  until that comparison holds there and not on the row before.

With few segments in a batch (large groups) each segment is searched on its own slice (no copy);
with many, the batch is searched once on complex keys ``segment + i·C_i``, which numpy orders
lexicographically (real part first) without rounding either part.

Each segment's part is what the row-by-row form sums over the segment, so a group cut by batches
adds its parts as before. A batch whose running sums are not all finite numbers (values or weights
near the double limit) is left to the row-by-row form (``applies``).
"""

from __future__ import annotations

import numpy as np

from uneven.catalog.kernels import Need

CUT_NAMES = ("below", "above", "quantile")


SLICES = 32  # up to this many segments in a batch, each is searched on its own slice
# a batch of shorter segments on average (rows per segment) is summed row by row: with a few rows per
# group the per-segment work here costs more than the passes it saves (bench/README.md, "Stream plan")
MIN_ROWS = 16


def applies(c: np.ndarray, totals: np.ndarray) -> bool:
    """Whether the batch's segments are long enough on average, and its running weights and its groups'
    totals all finite."""
    return bool(len(c) >= MIN_ROWS * len(totals) and np.isfinite(c).all() and np.isfinite(totals).all())


def locate(c: np.ndarray, seg: np.ndarray, ends: np.ndarray, targets: np.ndarray, side: str) -> np.ndarray:
    """(cuts, segments): per segment, the first row with C ≥ target (side "left") or C > target
    ("right"), its end where none; C is nondecreasing within each segment."""
    nseg = len(seg)
    if nseg <= SLICES:
        out = np.empty(targets.shape, dtype=np.int64)
        for k in range(nseg):
            a, b = int(seg[k]), int(ends[k])
            out[:, k] = a + np.searchsorted(c[a:b], targets[:, k], side=side)  # type: ignore[call-overload]
        return out
    keys = np.empty(len(c), dtype=np.complex128)
    keys.real = np.repeat(np.arange(nseg, dtype=np.float64), ends - seg)
    keys.imag = c
    want = np.empty(targets.shape, dtype=np.complex128)
    want.real = np.arange(nseg, dtype=np.float64)[None, :]
    want.imag = targets
    return np.searchsorted(keys, want, side=side)  # type: ignore[call-overload]


def _first_reaching(c: np.ndarray, seg: np.ndarray, ends: np.ndarray, W: np.ndarray,
                    ps: np.ndarray) -> np.ndarray | None:
    """(cuts, segments): the first row with C/W ≥ p, its segment's end where none; None when the
    rows near p·W do not settle it (then the caller sums row by row)."""
    j = locate(c, seg, ends, ps * W[None, :], "left")
    lo, hi = seg[None, :], ends[None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        for _ in range(16):
            here = j < hi
            up = here & ~(c[np.minimum(j, len(c) - 1)] / W[None, :] >= ps)
            down = ~up & (j > lo) & (c[np.maximum(j - 1, 0)] / W[None, :] >= ps)
            if not (up.any() or down.any()):
                return j
            j = j + up - down
    return None


def _sums(wd: np.ndarray, seg: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For break rows ``rows`` (K, segments), each within [segment start, segment end]: Σ w·d over
    [start, row) and over [row, end), per break row, each a sum of the chunks between sorted break rows."""
    n, nseg = len(wd), len(seg)  # (a segment's last chunk ends where the next segment starts)
    breaks = np.concatenate((seg[:, None], rows.T), axis=1)  # (segments, 1 + K)
    order = np.argsort(breaks, axis=1, kind="stable")
    sorted_ = np.take_along_axis(breaks, order, axis=1)
    flat = sorted_.ravel()
    nxt = np.empty_like(flat)
    nxt[:-1] = flat[1:]
    nxt[-1] = n
    chunk = np.add.reduceat(np.append(wd, 0.0), flat)  # (a break row may be the batch's end, n)
    chunk = np.where(nxt > flat, chunk, 0.0).reshape(sorted_.shape)  # an empty chunk (a repeated row) is 0
    before = np.zeros_like(chunk)  # Σ of the chunks in front, summed from the front
    np.cumsum(chunk[:, :-1], axis=1, out=before[:, 1:])
    ahead = np.cumsum(chunk[:, ::-1], axis=1)[:, ::-1]  # Σ from this chunk to the end
    inverse = np.empty_like(order)
    np.put_along_axis(inverse, order, np.arange(breaks.shape[1])[None, :].repeat(nseg, axis=0), axis=1)
    cols = inverse[:, 1:].T  # (K, segments): each break row's column after the sort
    seg_ix = np.arange(nseg)[None, :]
    return before[seg_ix, cols], ahead[seg_ix, cols]


def cut_parts(needs: list[Need], x: np.ndarray, d: np.ndarray, wd: np.ndarray, w: np.ndarray | None, c: np.ndarray,
              seg: np.ndarray, lens: np.ndarray, W: np.ndarray, m_seg: np.ndarray) -> dict[Need, np.ndarray] | None:
    """Each cut need's part per segment of the batch (what the row-by-row form sums over the
    segment), or None where a quantile's row is not settled near its target. ``W``: each segment's
    group weight (the totals); ``wd``: w·d (d when unweighted)."""
    n = len(x)
    ends = seg + lens  # exclusive
    last = ends - 1
    ww = np.ones(n) if w is None else w
    start_c = c[seg] - ww[seg]  # the running weight before each segment (the carried one, or 0)
    out: dict[Need, np.ndarray] = {}
    below = [nd for nd in needs if nd.name == "below"]
    above = [nd for nd in needs if nd.name == "above"]
    quantiles = [nd for nd in needs if nd.name == "quantile"]
    if quantiles:
        ps = np.array([float(nd.p) for nd in quantiles if nd.p is not None])[:, None]
        jq = _first_reaching(c, seg, ends, W, ps)
        if jq is None:
            return None
        found = np.where(jq < ends[None, :], x[np.minimum(jq, n - 1)], np.inf)
        for row, need in enumerate(quantiles):
            out[need] = found[row]
    if not (below or above):
        return out
    pb = np.array([float(nd.p) for nd in below if nd.p is not None])[:, None]
    pa = np.array([float(nd.p) for nd in above if nd.p is not None])[:, None]
    tb, ta = pb * W[None, :], (1.0 - pa) * W[None, :]
    jb = locate(c, seg, ends, tb, "left")  # the first row with C ≥ p·W: the rows before it are whole
    ja = locate(c, seg, ends, ta, "right")  # the first row with C > (1 − p)·W: the rows after it are whole
    past = np.minimum(ja + 1, ends[None, :])
    before, ahead = _sums(wd, seg, np.concatenate((jb, past)))
    with np.errstate(invalid="ignore", over="ignore"):
        has, jj = jb < ends[None, :], np.minimum(jb, n - 1)
        room = np.where(has, np.clip(tb - (c[jj] - ww[jj]), 0.0, ww[jj]), 0.0)  # row j's share t − C_{j−1}
        held = np.where(jb > seg[None, :], c[np.maximum(jb - 1, 0)] - start_c[None, :], 0.0) + room
        parts = before[:len(below)] + np.where(has, d[jj] * room, 0.0) + m_seg[None, :] * held
        for row, need in enumerate(below):
            out[need] = parts[row]
        has, jj = ja < ends[None, :], np.minimum(ja, n - 1)
        room = np.where(has, np.clip(c[jj] - ta, 0.0, ww[jj]), 0.0)  # row j's share C_j − u
        after = np.where(past < ends[None, :], ahead[len(below):], 0.0)
        held = room + np.where(has, c[last][None, :] - c[jj], 0.0)
        parts = np.where(has, d[jj] * room, 0.0) + after + m_seg[None, :] * held
        for row, need in enumerate(above):
            out[need] = parts[row]
    return out
