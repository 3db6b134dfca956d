"""A survey design on the stream plan: per group, the Gini's row terms summed per (stratum, PSU).

The window plan's linearized pass (compiler/passes/linearized.py) takes the with-replacement
variance of the PSU totals of the score u_k = Σ_j c_j·t_kj within strata:

    v = Σ_h n_h/(n_h − 1) · Σ_{c in h} (U_hc − Ū_h)²,   U_hc = Σ_j c_j·T_hcj

with the units the PSUs (each row its own unit without ``psu``; one stratum without ``strata``),
T_hcj the unit's total of the row term t_j (t1 = w·2((C − W)·d − S_d), the rank term less 2W·w·d with W
from the totals query, t2 = w·d, t3 = w on d = x − m: catalog/kernels_se.gini_score, engine/streamsums.gini_terms)
and c_j the coefficients, known only at a group's end (they read the
group's W, T, Gini and smallest value m). This module carries, per group, what v needs while the
sorted rows stream, and gives each finished group one row [fewest units in a stratum, v]; the
kernel (catalog/design_kernels.py) takes the standard error from it.

A PSU's rows are spread all over the sorted order (sorted by value, not by PSU), so its totals are
only complete at the group's end:

- with ``psu``: per batch the row terms are summed per (group, stratum, PSU) cell (integer codes,
  ``np.bincount``); the open group (the last of a batch, continued by the next) keeps its cells as a
  list of parts, merged again (summed per PSU) whenever they double in size, so memory and work stay
  linear in the group's number of PSUs, not its rows. At the group's end each PSU's score total
  U_hc = Σ_j c_j·T_hcj is formed first, then each stratum's Σ (U_hc − Ū_h)² in two passes (the
  mean, then the centred squares): the terms cancel in U (the Gini's rank term against w·d), and
  forming U before the spread keeps the digits a quadratic form in the terms' cross sums loses;
- strata without ``psu``: every row is a unit, complete at once, so nothing per row is kept: per
  batch each (group, stratum) cell's count, means and centred cross sums of the three terms, merged
  across batches by the pairwise update (Chan, Golub and LeVeque; common practice); at the group's
  end v = Σ_h n_h/(n_h − 1)·cᵀ M_h c.

Both keep the digits the window plan's raw sums (n·Q − S·S) lose: everything is centred at its
stratum's mean. The coefficients come from the group's own sums, carried here beside the cells
(Σ w·d·(2C − w), Σ w·d, W, m: the Gini as the kernels form it). Stratum and PSU values are matched
as ``GROUP BY`` matches them: NULL is a value of its own, NaN equals NaN, 0.0 equals −0.0 (``Codes``).

This module is a leaf (numpy, pandas, pyarrow): engine/streamsums.py computes the row terms and
feeds them here.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pyarrow as pa

STRATUM, PSU = "_uv_h", "_uv_psu"  # the rows query's design columns (compiler/passes/stream.py)
DESIGN_COLUMNS = (STRATUM, PSU)


class Codes:
    """Integer codes for the values of one design column, stable across batches (a stratum or PSU
    value seen in a later batch gets the code it had). NULL is one value; NaN equals NaN."""

    def __init__(self) -> None:
        self.ids: dict = {}

    def _id(self, value) -> int:
        if isinstance(value, float) and math.isnan(value):
            value = _NAN
        found = self.ids.get(value)
        if found is None:
            found = self.ids[value] = len(self.ids)
        return found

    def encode(self, column: pa.Array) -> np.ndarray:
        try:
            encoded = column.dictionary_encode()
        except (pa.ArrowNotImplementedError, pa.ArrowInvalid, pa.ArrowTypeError):  # lists, structs …
            return np.array([self._id(_hashable(v)) for v in column.to_pylist()], dtype=np.int64)
        lookup = np.array([self._id(_hashable(v)) for v in encoded.dictionary.to_pylist()] + [self._id(None)],
                          dtype=np.int64)
        indices = encoded.indices
        if indices.null_count:
            indices = indices.fill_null(len(encoded.dictionary))
        return lookup[indices.to_numpy(zero_copy_only=False).astype(np.int64)]


_NAN = ("nan",)  # NaN's key (NaN != NaN would give each NaN a code of its own)


def _hashable(value):
    if isinstance(value, list):
        return tuple(_hashable(v) for v in value)
    if isinstance(value, dict):
        return tuple(sorted((k, _hashable(v)) for k, v in value.items()))
    return value


def dense(*codes: np.ndarray) -> tuple[np.ndarray, list[np.ndarray]]:
    """(cell of each row, each column's value per cell) for the distinct rows of integer ``codes``."""
    locals_ = [codes[0]] + [pd.factorize(c)[0].astype(np.int64) for c in codes[1:]]
    spans = [int(c.max()) + 1 if len(c) else 1 for c in locals_]
    if len(codes[0]) and codes[0].min() >= 0 and math.prod(float(s) for s in spans) < 2.0 ** 62:
        key = locals_[0].astype(np.int64)  # (the first column is the batch's segment index: 0 … nseg − 1)
        for c, span in zip(locals_[1:], spans[1:]):
            key = key * span + c
        cell, _ = pd.factorize(key)
    else:
        cell, _ = pd.factorize(codes[0])
        for c, span in zip(locals_[1:], spans[1:]):
            cell, _ = pd.factorize(cell.astype(np.int64) * span + c)
    ncell = int(cell.max()) + 1 if len(cell) else 0
    first = np.full(ncell, len(cell), dtype=np.int64)
    np.minimum.at(first, cell, np.arange(len(cell)))
    return cell, [c[first] for c in codes]


def cell_sums(cell: np.ndarray, values: np.ndarray, ncell: int) -> np.ndarray:
    """(cells, columns): the sums of each column of ``values`` (rows, columns) per cell."""
    return np.stack([np.bincount(cell, weights=values[:, j], minlength=ncell) for j in range(values.shape[1])],
                    axis=1)


def merged_moments(cell: np.ndarray, ncell: int, n: np.ndarray, mean: np.ndarray,
                   M: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Parts (count n, means (parts, J), centred cross sums (parts, J, J)) merged per cell:
    n = Σ n_i, mean = Σ n_i·mean_i / n, M = Σ M_i + Σ n_i·(mean_i − mean)(mean_i − mean)ᵀ."""
    J = mean.shape[1]
    total = np.bincount(cell, weights=n, minlength=ncell)
    centre = cell_sums(cell, mean * n[:, None], ncell) / total[:, None]
    dev = mean - centre[cell]
    out = np.zeros((ncell, J, J))
    for j in range(J):
        for k in range(j, J):
            part = M[:, j, k] + n * dev[:, j] * dev[:, k]
            out[:, j, k] = out[:, k, j] = np.bincount(cell, weights=part, minlength=ncell)
    return total, centre, out


def design_rows(group: np.ndarray, stratum: np.ndarray, n: np.ndarray, mean: np.ndarray, M: np.ndarray,
                groups: int) -> np.ndarray:
    """(groups, 1 + J²): per group [the fewest units of any of its strata, Σ_h n_h/(n_h − 1)·M_h],
    from complete units or parts of strata (n, means, centred cross sums), merged per (group, stratum)
    first. A stratum of one unit adds nothing to the sum (the window plan's NULL term, which SUM skips) and
    makes ``fewest`` 1: the standard error is then NULL."""
    J = mean.shape[1]
    cell, (g_of, _) = dense(group, stratum)
    ncell = len(g_of)
    n_h, _, M_h = merged_moments(cell, ncell, n, mean, M)
    scale = np.where(n_h > 1, n_h / np.where(n_h > 1, n_h - 1.0, 1.0), 0.0)
    out = np.zeros((groups, 1 + J * J))
    fewest = np.full(groups, np.inf)
    np.minimum.at(fewest, g_of, n_h)
    out[:, 0] = fewest
    flat = (M_h * scale[:, None, None]).reshape(ncell, J * J)
    for j in range(J * J):
        out[:, 1 + j] = np.bincount(g_of, weights=flat[:, j], minlength=groups)
    return out


class DesignSums:
    """The per-group design state of one streamed pass (see the module's docstring). ``feed`` takes a
    batch's row terms and segments and returns one row per segment ([fewest, v], NaN for the last,
    still open segment); ``close`` gives the open group's row when its last batch has gone by."""

    width = 2

    def __init__(self) -> None:
        self.codes = {STRATUM: Codes(), PSU: Codes()}
        self.parts: list[tuple] = []  # the open group's parts: (stratum, psu, sums) or (stratum, n, mean, M)
        self.size = 0  # rows of the open group's parts
        self.merged_size = 0  # rows of its parts after their last merge
        self.sums = np.zeros(GROUP_SUMS)  # the open group's [Σ w·d·(2C − w), Σ w·d, W, m]

    def feed(self, t: np.ndarray, c: np.ndarray, m: np.ndarray, seg: np.ndarray, columns: dict[str, pa.Array],
             continues: bool) -> np.ndarray:
        """``t`` the row terms (rows, 3 for the Gini's), ``c`` the running weight, ``m`` each segment's
        smallest value."""
        n, nseg = len(t), len(seg)
        lens = np.diff(np.append(seg, n))
        g = np.repeat(np.arange(nseg), lens)
        h = self.codes[STRATUM].encode(columns[STRATUM]) if STRATUM in columns else np.zeros(n, dtype=np.int64)
        if PSU in columns:
            cell, (g_c, h_c, p_c) = dense(g, h, self.codes[PSU].encode(columns[PSU]))
            parts: tuple = (g_c, h_c, p_c, cell_sums(cell, t, len(g_c)))
        else:
            parts = self._row_moments(g, h, t)
        sums = self._group_sums(t, c, m, seg, continues)
        if not continues:
            self._reset()
        out = np.full((nseg, self.width), np.nan)
        if continues:
            self._add(self._take(parts, 0))
        if nseg > 1:  # every segment but the last ends in this batch
            closed = self._select(parts, (parts[0] > (0 if continues else -1)) & (parts[0] < nseg - 1))
            if continues:  # the open group ends here: its merged parts as segment 0
                closed = _concat(self._finished(0), closed)
            out[:nseg - 1] = self._rows(closed, sums[:nseg - 1])
            self._reset()
            self._add(self._take(parts, nseg - 1))
        elif not continues:
            self._add(self._take(parts, 0))
        self.sums = sums[-1].copy()
        return out

    def close(self) -> np.ndarray:
        """The open group's row ([fewest, v]); the state is then empty."""
        row = self._rows(self._finished(0), self.sums[None, :])[0]
        self._reset()
        return row

    def _group_sums(self, t: np.ndarray, c: np.ndarray, m: np.ndarray, seg: np.ndarray,
                    continues: bool) -> np.ndarray:
        """Each segment's group sums that ``_rows`` reads (the Gini's coefficients: ``coefficients``), the
        open group's so far added to the first segment's when it goes on."""
        ends = np.append(seg[1:], len(t)) - 1
        sums = np.stack([np.add.reduceat(t[:, 1] * (2.0 * c - t[:, 2]), seg), np.add.reduceat(t[:, 1], seg),
                         c[ends], m], axis=1)
        if continues:  # the open group goes on: its cells join its parts, its sums add up
            sums[0, :2] += self.sums[:2]
        return sums

    # --- parts ------------------------------------------------------------------------------------

    def _row_moments(self, g: np.ndarray, h: np.ndarray, t: np.ndarray) -> tuple:
        """Every row its own unit: per (segment, stratum) cell the count, means and centred cross sums."""
        cell, (g_c, h_c) = dense(g, h)
        ncell = len(g_c)
        count = np.bincount(cell, minlength=ncell).astype(np.float64)
        mean = cell_sums(cell, t, ncell) / count[:, None]
        dev = t - mean[cell]
        J = t.shape[1]
        M = np.zeros((ncell, J, J))
        for j in range(J):
            for k in range(j, J):
                M[:, j, k] = M[:, k, j] = np.bincount(cell, weights=dev[:, j] * dev[:, k], minlength=ncell)
        return g_c, h_c, count, mean, M

    @staticmethod
    def _select(parts: tuple, mask: np.ndarray) -> tuple:
        return tuple(p[mask] for p in parts)

    def _take(self, parts: tuple, segment: int) -> tuple:
        """One segment's cells, without their segment column."""
        return self._select(parts, parts[0] == segment)[1:]

    def _add(self, part: tuple) -> None:
        if len(part[0]) == 0:
            return
        self.parts.append(part)
        self.size += len(part[0])
        if self.size > 2 * max(self.merged_size, 1024):  # merge when the parts have doubled: linear work
            merged = self._merged()
            self.parts, self.size = [merged], len(merged[0])
            self.merged_size = self.size

    def _merged(self) -> tuple:
        """The open group's parts as one: summed per PSU, or moments merged per stratum."""
        cols = [np.concatenate(c) for c in zip(*self.parts)]
        if cols[-1].ndim == 2:  # (stratum, psu, sums): the PSUs' partial totals
            cell, (h_c, p_c) = dense(cols[0], cols[1])
            return h_c, p_c, cell_sums(cell, cols[2], len(h_c))
        cell, (h_c,) = dense(cols[0])
        n_c, mean_c, M_c = merged_moments(cell, len(h_c), cols[1], cols[2], cols[3])
        return h_c, n_c, mean_c, M_c

    def _finished(self, segment: int) -> tuple | None:
        """The open group's parts, merged, as cells of segment ``segment`` (None when it has none)."""
        if not self.parts:
            return None
        merged = self._merged()
        return (np.full(len(merged[0]), segment, dtype=np.int64),) + merged

    def _reset(self) -> None:
        self.parts, self.size, self.merged_size = [], 0, 0
        self.sums = np.zeros(GROUP_SUMS)

    def _coefficients(self, sums: np.ndarray) -> np.ndarray:
        """(segments, terms): the score's coefficients from the segments' group sums (the Gini's)."""
        return coefficients(sums)

    def _rows(self, cells: tuple | None, sums: np.ndarray) -> np.ndarray:
        """[fewest, v] per segment of ``cells`` (segment, stratum, psu, sums) or (segment, stratum, n,
        means, centred cross sums), with ``sums`` each segment's group sums (``coefficients``)."""
        groups = len(sums)
        if cells is None or len(cells[0]) == 0:
            return np.full((groups, self.width), np.nan)
        coef = self._coefficients(sums)
        if len(cells) == 4:  # complete PSU totals: each PSU's score total U first, a unit of count 1
            g_c, h_c, _, totals = cells
            units = len(g_c)
            with np.errstate(invalid="ignore", over="ignore"):
                U = np.einsum("uj,uj->u", totals, coef[g_c])
            return design_rows(g_c, h_c, np.ones(units), U[:, None], np.zeros((units, 1, 1)), groups)
        g_c, h_c, count, mean, M = cells  # rows as units: the score's mean and spread per stratum cell
        with np.errstate(invalid="ignore", over="ignore"):
            U = np.einsum("uj,uj->u", mean, coef[g_c])
            spread = np.einsum("uj,ujl,ul->u", coef[g_c], M, coef[g_c])
        return design_rows(g_c, h_c, count, U[:, None], spread[:, None, None], groups)


GROUP_SUMS = 4  # [Σ w·d·(2C − w), Σ w·d, W, m] per group


def coefficients(sums: np.ndarray) -> np.ndarray:
    """(groups, 3): c1 … c3 of the Gini's score u = c1·t1 + c2·t2 + c3·t3 (catalog/kernels_se.gini_score)
    from each group's [A = Σ w·d·(2C − w), B = Σ w·d, W, m]: T = m·W + B, G = (A − W·B)/W/T (NaN
    unless T > 0), c1 = 1/(W·T), c2 = (1 − G)/T (−(1 + G)/T + 2W·c1: t1 is the rank term less 2W·w·d,
    engine/streamsums.gini_terms), c3 = (B − G·T)/W/T − m·G/T."""
    A, B, W, m = sums.T
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        T = m * W + B
        G = np.where(T > 0, (A - W * B) / W / T, np.nan)
        return np.stack([1.0 / (W * T), (1.0 - G) / T, (B - G * T) / W / T - m * G / T], axis=1)


def _concat(a: tuple | None, b: tuple) -> tuple:
    return b if a is None else tuple(np.concatenate([x, y]) for x, y in zip(a, b))
