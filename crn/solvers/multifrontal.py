"""Sparse LU of a chain's generator on its configuration lattice, by nested dissection.

The configurations of a conservative network are points of a low-dimensional
integer lattice, and every transition moves a configuration by a reaction's
net change, so cutting the lattice across a coordinate along a band as wide as
the largest change of that coordinate separates it into two halves with no
transition between them. Ordering the halves first (recursively) and the band
last is a geometric nested dissection (George 1973): on the two-dimensional
lattice of a three-state protocol with N configurations it leaves O(N log N)
entries in the factors and costs O(N^1.5) operations, where minimum-degree
orderings cost more. The factorisation is multifrontal (Duff, Reid 1983):
each separator's rows and columns are gathered with the updates of the
separators below it into one dense front, factorised with dense LAPACK/BLAS
kernels (large fronts) or compiled loops (small ones), and its Schur complement
passed up the tree.

Everything is general: any conservative network gives coordinates and
widths; only the speed depends on how low-dimensional the lattice is, and
:func:`plan` reports the factor's size before any numeric work so a caller can
choose another solver when it would be too large.

References
----------
George, "Nested dissection of a regular finite element mesh", SIAM J. Numer.
Anal. 10(2):345-363, 1973. Duff, Reid, "The multifrontal solution of
indefinite sparse symmetric linear equations", ACM Trans. Math. Softw.
9(3):302-325, 1983. Liu, "The multifrontal method for sparse matrix solution:
theory and practice", SIAM Review 34(1):82-109, 1992.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
import scipy.sparse as sp

__all__ = ["DissectionPlan", "LatticeFactor", "plan", "factorize"]

_LEAF = 16  # configurations below which a region is not cut further
_LARGE_FRONT = 128  # fronts at least this wide are factorised with LAPACK/BLAS


@dataclass(frozen=True)
class DissectionPlan:
    """Symbolic analysis: the nested-dissection order and the sizes of every front.

    Attributes
    ----------
    order : ndarray of int64, shape (n,)
        ``order[p]`` is the row eliminated p-th.
    lo, sep, hi : ndarray of int64, shape (n_fronts,)
        Front t, in postorder, covers positions ``lo..hi-1`` of ``order`` (its
        subtree) and eliminates positions ``sep..hi-1``.
    bptr, bnd : ndarray of int64
        Positions (sorted, all >= ``hi[t]``) of the rows that front t updates:
        ``bnd[bptr[t]:bptr[t + 1]]``.
    children_ptr, children : ndarray of int64
        Children of each front, in postorder.
    fbase, ubase : ndarray of int64, shape (n_fronts,)
        Offset of each front's factors in the factor array, and of its update
        matrix on the stack of updates (children's updates are freed when their
        parent is assembled, so a front's update overwrites its first child's).
    entries : int
        Entries of the L and U factors.
    flops : float
        Floating-point operations of the numeric factorisation.
    stack : int
        Largest number of update-matrix entries held at once.
    largest_front : int
        Order of the largest dense front.
    """

    order: np.ndarray
    lo: np.ndarray
    sep: np.ndarray
    hi: np.ndarray
    bptr: np.ndarray
    bnd: np.ndarray
    children_ptr: np.ndarray
    children: np.ndarray
    fbase: np.ndarray
    ubase: np.ndarray
    entries: int
    flops: float
    stack: int
    largest_front: int

    @property
    def n_fronts(self) -> int:
        """Number of fronts (separators and leaves) of the plan."""
        return int(self.lo.shape[0])

    @property
    def nbytes(self) -> int:
        """Peak bytes of the numeric factorisation: factors, update stack and largest front."""
        return int(8 * (self.entries + self.stack + self.largest_front ** 2)
                   + 8 * self.order.shape[0] * 6)


# -- ordering ------------------------------------------------------------------------------------

@numba.njit(cache=True)
def _doubled(array, used):
    out = np.empty(2 * array.shape[0], dtype=array.dtype)
    out[:used] = array[:used]
    return out


@numba.njit(cache=True)
def _dissect(coords, widths, leaf):  # noqa: C901 - one numba kernel, an explicit stack
    """Recursive coordinate bisection; returns the order and the fronts in preorder."""
    n, d = coords.shape
    order = np.arange(n)
    cap = n // max(leaf // 4, 1) + 16
    lo = np.empty(cap, dtype=np.int64)
    sep = np.empty(cap, dtype=np.int64)
    hi = np.empty(cap, dtype=np.int64)
    parent = np.empty(cap, dtype=np.int64)
    count = 0
    # regions still to cut: (lo, hi, parent front)
    s_lo = np.empty(64, dtype=np.int64)
    s_hi = np.empty(64, dtype=np.int64)
    s_par = np.empty(64, dtype=np.int64)
    s_lo[0], s_hi[0], s_par[0] = 0, n, -1
    top = 1
    scratch = np.empty(n, dtype=np.int64)
    vmin = np.empty(d, dtype=np.int64)
    vmax = np.empty(d, dtype=np.int64)
    while top > 0:
        if count + 1 >= lo.shape[0]:
            lo, sep = _doubled(lo, count), _doubled(sep, count)
            hi, parent = _doubled(hi, count), _doubled(parent, count)
        if top + 2 >= s_lo.shape[0]:
            s_lo, s_hi, s_par = _doubled(s_lo, top), _doubled(s_hi, top), _doubled(s_par, top)
        top -= 1
        a, b, par = s_lo[top], s_hi[top], s_par[top]
        m = b - a
        if m == 0:
            continue
        best_c, best_cut, best_size = -1, 0, m + 1
        if m > leaf:
            for c in range(d):
                vmin[c] = coords[order[a], c]
                vmax[c] = vmin[c]
            for k in range(a, b):
                i = order[k]
                for c in range(d):
                    v = coords[i, c]
                    if v < vmin[c]:
                        vmin[c] = v
                    if v > vmax[c]:
                        vmax[c] = v
            for c in range(d):
                w = widths[c]
                if w <= 0 or vmax[c] - vmin[c] < 2 * w:
                    continue
                span = vmax[c] - vmin[c] + 1
                hist = np.zeros(span, dtype=np.int64)
                for k in range(a, b):
                    hist[coords[order[k], c] - vmin[c]] += 1
                # the band [cut, cut + w) nearest the median with both sides non-empty
                below, cut = 0, 0
                for v in range(span):
                    if below + hist[v] > m // 2:
                        cut = v
                        break
                    below += hist[v]
                cut = min(max(cut, 1), span - w - 1)
                size = 0
                for v in range(cut, cut + w):
                    size += hist[v]
                if size < best_size:
                    best_c, best_cut, best_size = c, cut + vmin[c], size
        if best_c < 0:
            lo[count], sep[count], hi[count], parent[count] = a, a, b, par
            count += 1
            continue
        c, w = best_c, widths[best_c]
        n_left, n_right = 0, 0
        for k in range(a, b):
            v = coords[order[k], c]
            if v < best_cut:
                n_left += 1
            elif v >= best_cut + w:
                n_right += 1
        p_left, p_right, p_sep = a, a + n_left, a + n_left + n_right
        for k in range(a, b):
            i = order[k]
            v = coords[i, c]
            if v < best_cut:
                scratch[p_left] = i
                p_left += 1
            elif v >= best_cut + w:
                scratch[p_right] = i
                p_right += 1
            else:
                scratch[p_sep] = i
                p_sep += 1
        for k in range(a, b):
            order[k] = scratch[k]
        me = par
        if best_size > 0:
            me = count
            lo[count], sep[count], hi[count], parent[count] = a, a + n_left + n_right, b, par
            count += 1
        s_lo[top], s_hi[top], s_par[top] = a, a + n_left, me
        top += 1
        s_lo[top], s_hi[top], s_par[top] = a + n_left, a + n_left + n_right, me
        top += 1
    return order, lo[:count].copy(), sep[:count].copy(), hi[:count].copy(), parent[:count].copy()


@numba.njit(cache=True)
def _push(bnd, fill, q):
    if fill == bnd.shape[0]:
        bnd = _doubled(bnd, fill)
    bnd[fill] = q
    return bnd, fill + 1


@numba.njit(cache=True)
def _boundaries(sep, hi, children_ptr, children, indptr, indices, t_indptr, t_indices, n):
    """Rows each front updates: neighbours of its separator and its children's, beyond it.

    The neighbours are read from the rows of the permuted matrix and of its transpose.
    """
    n_fronts = sep.shape[0]
    mark = np.full(n, -1, dtype=np.int64)
    bptr = np.zeros(n_fronts + 1, dtype=np.int64)
    bnd = np.empty(4 * n + 16, dtype=np.int64)
    fill = 0
    for t in range(n_fronts):
        start = fill
        for p in range(sep[t], hi[t]):
            for k in range(indptr[p], indptr[p + 1]):
                q = indices[k]
                if q >= hi[t] and mark[q] != t:
                    mark[q] = t
                    bnd, fill = _push(bnd, fill, q)
            for k in range(t_indptr[p], t_indptr[p + 1]):
                q = t_indices[k]
                if q >= hi[t] and mark[q] != t:
                    mark[q] = t
                    bnd, fill = _push(bnd, fill, q)
        for kc in range(children_ptr[t], children_ptr[t + 1]):
            c = children[kc]
            for k in range(bptr[c], bptr[c + 1]):
                q = bnd[k]
                if q >= hi[t] and mark[q] != t:
                    mark[q] = t
                    bnd, fill = _push(bnd, fill, q)
        bnd[start:fill] = np.sort(bnd[start:fill])
        bptr[t + 1] = fill
    return bptr, bnd[:fill].copy()


@numba.njit(cache=True)
def _layout(sep, hi, bptr, children_ptr, children):
    n_fronts = sep.shape[0]
    fbase = np.zeros(n_fronts, dtype=np.int64)
    ubase = np.zeros(n_fronts, dtype=np.int64)
    used, top, peak = 0, 0, 0
    for t in range(n_fronts):
        s = hi[t] - sep[t]
        b = bptr[t + 1] - bptr[t]
        fbase[t] = used
        used += s * s + 2 * s * b
        if children_ptr[t + 1] > children_ptr[t]:
            top = ubase[children[children_ptr[t]]]
        ubase[t] = top
        top += b * b
        peak = max(peak, top)
    return fbase, ubase, peak


def plan(matrix: sp.spmatrix, coords: np.ndarray, widths: np.ndarray) -> DissectionPlan:
    """Nested-dissection order and front sizes of ``matrix`` on lattice ``coords``.

    Parameters
    ----------
    matrix : scipy.sparse matrix, shape (n, n)
        Only its pattern is used.
    coords : ndarray of int, shape (n, d)
        Lattice coordinates of each row (the configurations' counts).
    widths : ndarray of int, shape (d,)
        Largest change of each coordinate along an entry of ``matrix``: an
        entry (i, j) must have ``abs(coords[i] - coords[j]) <= widths``.

    Returns
    -------
    DissectionPlan
    """
    n = matrix.shape[0]
    coords = np.ascontiguousarray(coords, dtype=np.int64)
    widths = np.ascontiguousarray(widths, dtype=np.int64)
    order, lo, sep, hi, parent = _dissect(coords, widths, _LEAF)
    post = np.argsort(hi, kind="stable")  # a child's range ends before its parent's
    rank = np.empty_like(post)
    rank[post] = np.arange(post.size)
    lo, sep, hi = lo[post], sep[post], hi[post]
    parent = np.where(parent[post] >= 0, rank[np.maximum(parent[post], 0)], -1)
    children = np.flatnonzero(parent >= 0)
    children = children[np.argsort(parent[children], kind="stable")].astype(np.int64)
    children_ptr = np.zeros(post.size + 1, dtype=np.int64)
    np.cumsum(np.bincount(parent[children], minlength=post.size), out=children_ptr[1:])
    position = np.empty(n, dtype=np.int64)
    position[order] = np.arange(n)
    matrix = sp.csr_matrix(matrix)
    position = np.empty(n, dtype=matrix.indices.dtype)
    position[order] = np.arange(n)
    ptr, idx, _ = _permute_rows(matrix.indptr, matrix.indices, np.ones(0), order, position)
    del position
    # the pattern of A + A^T, as the rows of P A P^T and of its transpose
    transposed = sp.csr_matrix((np.ones(idx.size, dtype=np.int8), idx, ptr), shape=(n, n)).T
    transposed = transposed.tocsr()
    bptr, bnd = _boundaries(sep, hi, children_ptr, children, ptr, idx, transposed.indptr,
                            transposed.indices, n)
    del transposed, ptr, idx
    s = (hi - sep).astype(np.float64)
    b = np.diff(bptr).astype(np.float64)
    entries = int((s * s + 2 * s * b).sum())
    flops = float((2.0 / 3.0 * s ** 3 + 2 * s * s * b + 2 * s * b * b).sum())
    fbase, ubase, peak = _layout(sep, hi, bptr, children_ptr, children)
    return DissectionPlan(order=order, lo=lo, sep=sep, hi=hi, bptr=bptr, bnd=bnd,
                          children_ptr=children_ptr, children=children,
                          fbase=fbase, ubase=ubase, entries=entries, flops=flops, stack=peak,
                          largest_front=int((s + b).max(initial=0)))


# -- numeric factorisation -------------------------------------------------------------------------

@numba.njit(cache=True)
def _assemble(t, front, loc, sep, hi, bptr, bnd, children_ptr, children, ubase, ustack,
              a_ptr, a_idx, a_val, t_ptr, t_idx, t_val):
    """Gather front t: the matrix's entries in its rows and columns and its children's updates."""
    s = hi[t] - sep[t]
    nb = bptr[t + 1] - bptr[t]
    f = s + nb
    for i in range(s):
        loc[sep[t] + i] = i
    for r in range(nb):
        loc[bnd[bptr[t] + r]] = s + r
    for i in range(f):
        for j in range(f):
            front[i, j] = 0.0
    for p in range(sep[t], hi[t]):
        i = loc[p]
        for k in range(a_ptr[p], a_ptr[p + 1]):
            q = a_idx[k]
            if q >= sep[t]:
                front[i, loc[q]] += a_val[k]
        for k in range(t_ptr[p], t_ptr[p + 1]):
            q = t_idx[k]
            if q >= hi[t]:
                front[loc[q], i] += t_val[k]
    for kc in range(children_ptr[t], children_ptr[t + 1]):
        c = children[kc]
        cb0, cb = bptr[c], bptr[c + 1] - bptr[c]
        base = ubase[c]
        for r in range(cb):
            lr = loc[bnd[cb0 + r]]
            for q in range(cb):
                front[lr, loc[bnd[cb0 + q]]] += ustack[base + r * cb + q]


@numba.njit(cache=True)
def _store(t, lu, perm, u12, l21, update, sep, hi, bptr, fbase, values, pivots, ubase, ustack):
    s = hi[t] - sep[t]
    nb = bptr[t + 1] - bptr[t]
    base = fbase[t]
    for i in range(s):
        pivots[sep[t] + i] = perm[i]
        for j in range(s):
            values[base + i * s + j] = lu[i, j]
    base += s * s
    for i in range(s):
        for r in range(nb):
            values[base + i * nb + r] = u12[i, r]
    base += s * nb
    for r in range(nb):
        for j in range(s):
            values[base + r * s + j] = l21[r, j]
    ub = ubase[t]
    for r in range(nb):
        for q in range(nb):
            ustack[ub + r * nb + q] = update[r, q]


@numba.njit(cache=True, fastmath=True)
def _partial_lu(front, s, row):
    """Eliminate the first s rows and columns of a dense front in place, without exchanges."""
    f = front.shape[0]
    for k in range(s):
        inv = 1.0 / front[k, k]
        n = f - k - 1
        pivot_row = front[k, k + 1:]
        for j in range(n):
            row[j] = pivot_row[j]
        for i in range(k + 1, f):
            factor = front[i, k] * inv
            front[i, k] = factor
            if factor != 0.0:
                target = front[i, k + 1:]
                for j in range(n):
                    target[j] -= factor * row[j]


@numba.njit(cache=True)
def _factor_small(t0, t1, buffer, loc, sep, hi, bptr, bnd, children_ptr, children, ubase,
                  ustack, fbase, values, pivots, a_ptr, a_idx, a_val, t_ptr, t_idx, t_val):
    """Fronts t0..t1-1 by compiled loops, without row exchanges (see :func:`factorize`)."""
    row = np.empty(int(np.sqrt(buffer.shape[0])) + 1)
    for t in range(t0, t1):
        s = hi[t] - sep[t]
        f = s + bptr[t + 1] - bptr[t]
        front = buffer[: f * f].reshape((f, f))
        _assemble(t, front, loc, sep, hi, bptr, bnd, children_ptr, children, ubase, ustack,
                  a_ptr, a_idx, a_val, t_ptr, t_idx, t_val)
        _partial_lu(front, s, row)
        _store(t, front[:s, :s], np.arange(s), front[:s, s:], front[s:, :s], front[s:, s:],
               sep, hi, bptr, fbase, values, pivots, ubase, ustack)


@numba.njit(cache=True, fastmath=True)
def _dot(values, start, vector, count):
    total = 0.0
    for j in range(count):
        total += values[start + j] * vector[j]
    return total


@numba.njit(cache=True)
def _solve(x, sep, hi, bptr, bnd, fbase, values, pivots):
    """Overwrite x (k, n), in elimination order, with the solution of the factored system.

    One pass over the factors serves all k columns: each factor row is read once
    from memory and then from cache for every column.
    """
    n_fronts = sep.shape[0]
    k = x.shape[0]
    width, border = 1, 1
    for t in range(n_fronts):
        width = max(width, hi[t] - sep[t])
        border = max(border, bptr[t + 1] - bptr[t])
    tmp = np.empty((k, width))
    gathered = np.empty((k, border))
    for t in range(n_fronts):
        s = hi[t] - sep[t]
        nb = bptr[t + 1] - bptr[t]
        base = fbase[t]
        for c in range(k):
            for i in range(s):
                tmp[c, i] = x[c, sep[t] + pivots[sep[t] + i]]
        for i in range(1, s):
            for c in range(k):
                tmp[c, i] -= _dot(values, base + i * s, tmp[c], i)
        for c in range(k):
            for i in range(s):
                x[c, sep[t] + i] = tmp[c, i]
        lbase = base + s * s + s * nb
        for r in range(nb):
            q = bnd[bptr[t] + r]
            for c in range(k):
                x[c, q] -= _dot(values, lbase + r * s, tmp[c], s)
    for t in range(n_fronts - 1, -1, -1):
        s = hi[t] - sep[t]
        nb = bptr[t + 1] - bptr[t]
        base = fbase[t]
        for c in range(k):
            for r in range(nb):
                gathered[c, r] = x[c, bnd[bptr[t] + r]]
        ubase = base + s * s
        for i in range(s - 1, -1, -1):
            row = base + i * s
            for c in range(k):
                value = x[c, sep[t] + i] - _dot(values, ubase + i * nb, gathered[c], nb)
                value -= _dot(values, row + i + 1, tmp[c, i + 1:], s - i - 1)
                tmp[c, i] = value / values[row + i]
        for c in range(k):
            for i in range(s):
                x[c, sep[t] + i] = tmp[c, i]


class LatticeFactor:
    """LU factors of a matrix in nested-dissection order; :meth:`solve` solves with them."""

    def __init__(self, layout: DissectionPlan, fbase: np.ndarray, values: np.ndarray,
                 pivots: np.ndarray) -> None:
        self.plan = layout
        self._fbase = fbase
        self._values = values
        self._pivots = pivots
        self.shape = (layout.order.shape[0],) * 2

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        """Solve ``A x = rhs`` for rhs of shape (n,) or (n, k)."""
        rhs = np.asarray(rhs, dtype=np.float64)
        vector = rhs.ndim == 1
        p = self.plan
        work = np.ascontiguousarray(rhs.reshape(rhs.shape[0], -1)[p.order].T)
        _solve(work, p.sep, p.hi, p.bptr, p.bnd, self._fbase, self._values, self._pivots)
        out = np.empty((rhs.shape[0], work.shape[0]))
        out[p.order] = work.T
        return out.ravel() if vector else out


@numba.njit(cache=True)
def _swaps_to_order(swaps):
    """LAPACK's row interchanges (row i swapped with swaps[i], in turn) as an order of rows."""
    order = np.arange(swaps.shape[0])
    for i in range(swaps.shape[0]):
        j = swaps[i]
        order[i], order[j] = order[j], order[i]
    return order


@numba.njit(cache=True)
def _permute_rows(indptr, indices, data, order, position):
    """CSR of P A P^T: row p is row order[p], columns renamed by position (unsorted)."""
    n = order.shape[0]
    ptr = np.zeros(n + 1, dtype=indptr.dtype)
    for p in range(n):
        i = order[p]
        ptr[p + 1] = ptr[p] + indptr[i + 1] - indptr[i]
    idx = np.empty(indices.shape[0], dtype=indices.dtype)
    val = np.empty(data.shape[0] and indices.shape[0], dtype=data.dtype)  # none for a pattern
    for p in range(n):
        i = order[p]
        k = ptr[p]
        for j in range(indptr[i], indptr[i + 1]):
            idx[k] = position[indices[j]]
            if val.shape[0]:
                val[k] = data[j]
            k += 1
    return ptr, idx, val


def factorize(matrix: sp.spmatrix, layout: DissectionPlan) -> LatticeFactor:
    """Numeric LU factorisation of ``matrix`` in the order of ``layout``.

    Small fronts are factorised without row exchanges and large ones with
    LAPACK's partial pivoting inside the front. Skipping exchanges is safe for
    the systems of :mod:`crn.solvers.exact`: ``-Q`` restricted to transient
    configurations is a nonsingular M-matrix with non-negative row sums
    (row diagonally dominant), every front holds a principal submatrix of a
    Schur complement of it, and Schur complements and principal submatrices
    of such matrices are again such matrices (Fiedler, Ptak 1962; Berman,
    Plemmons, "Nonnegative Matrices in the Mathematical Sciences", 1994,
    ch. 6), so every pivot is positive and no entry grows in elimination.

    Parameters
    ----------
    matrix : scipy.sparse matrix, shape (n, n)
    layout : DissectionPlan
        From :func:`plan` on the same matrix's pattern.

    Returns
    -------
    LatticeFactor
    """
    from scipy.linalg import lu_factor, solve_triangular
    from scipy.linalg.blas import dgemm

    n = matrix.shape[0]
    matrix = sp.csr_matrix(matrix)
    position = np.empty(n, dtype=matrix.indices.dtype)
    position[layout.order] = np.arange(n)
    ptr, idx, val = _permute_rows(matrix.indptr, matrix.indices, matrix.data, layout.order,
                                  position)
    transposed = sp.csr_matrix((val, idx, ptr), shape=(n, n)).T.tocsr()
    args = (ptr, idx, val, transposed.indptr, transposed.indices, transposed.data)
    del position, transposed
    fbase, ubase, peak = layout.fbase, layout.ubase, layout.stack
    values = np.empty(layout.entries, dtype=np.float64)
    pivots = np.empty(n, dtype=np.int64)
    ustack = np.empty(max(peak, 1), dtype=np.float64)
    loc = np.empty(n, dtype=np.int64)
    s = layout.hi - layout.sep
    f = s + np.diff(layout.bptr)
    small = f < _LARGE_FRONT
    buffer = np.empty(int((f[small] ** 2).max(initial=1)), dtype=np.float64)
    # one buffer for every large front: allocating each anew costs page faults
    large = np.empty(int((f[~small] ** 2).max(initial=0)), dtype=np.float64)
    structure = (layout.sep, layout.hi, layout.bptr, layout.bnd, layout.children_ptr,
                 layout.children, ubase, ustack)
    t = 0
    while t < s.size:
        if small[t]:
            stop = t
            while stop < s.size and small[stop]:
                stop += 1
            _factor_small(t, stop, buffer, loc, *structure, fbase, values, pivots, *args)
            t = stop
            continue
        front = large[: f[t] * f[t]].reshape(f[t], f[t])
        _assemble(t, front, loc, *structure, *args)
        st = s[t]
        lu, swaps = lu_factor(front[:st, :st], check_finite=False)
        perm = _swaps_to_order(swaps.astype(np.int64))
        u12 = solve_triangular(lu, front[:st, st:][perm], lower=True, unit_diagonal=True,
                               check_finite=False)
        # x = U11^-T F21^T, so L21 = F21 U11^-1 = x^T
        x = solve_triangular(lu, front[st:, :st].T, trans="T", lower=False, check_finite=False)
        nb, base = f[t] - st, fbase[t]
        values[base: base + st * st].reshape(st, st)[...] = lu
        values[base + st * st: base + st * (st + nb)].reshape(st, nb)[...] = u12
        values[base + st * (st + nb): base + st * (st + 2 * nb)].reshape(nb, st)[...] = x.T
        pivots[layout.sep[t]: layout.hi[t]] = perm
        # the Schur complement F22 - L21 U12 straight onto the stack of updates: its
        # transpose is Fortran-ordered there, so BLAS updates it in place
        update = ustack[ubase[t]: ubase[t] + nb * nb].reshape(nb, nb)
        update[...] = front[st:, st:]
        if nb:
            dgemm(-1.0, u12, x, 1.0, update.T, trans_a=1, overwrite_c=1)
        del lu, u12, x
        t += 1
    return LatticeFactor(layout, fbase, values, pivots)
