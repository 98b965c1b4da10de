"""Curve decimation for plots: largest-triangle-three-buckets (LTTB).

The dashboard overlays many curves; each is cut down server-side to a few
hundred points that keep its visual shape (peaks, steps, transitions) rather
than every n-th point.  :func:`lttb` returns *indices*, so any other column of
the same run (uncertainty, time, a second quantity) can be picked alongside.

Buckets follow the order of the points, not the value of x, so curves that go
back and forth in x (a heating-cooling cycle, a hysteresis loop) are decimated
along their path.  The triangle areas of one bucket all scale by the same
factor when x or y is rescaled, so the choice does not depend on units.
"""

from __future__ import annotations

import numpy as np

from ..errors import InvalidValue

__all__ = ["lttb", "bucket_bounds"]

#: The all-pairs table is used for buckets of at most this many points (its
#: cost grows with the square of the width; beyond about 40-50 points a bucket the
#: bucket-by-bucket loop is faster, measured on 5,000-point curves) and while
#: the table has at most this many entries (memory bound, 8 bytes each).
_PAIR_TABLE_MAX_WIDTH = 40
_PAIR_TABLE_LIMIT = 1_000_000


def bucket_bounds(n_points: int, n_out: int) -> np.ndarray:
    """Start indices of the ``n_out - 2`` inner buckets, plus the end of the last.

    The first and last points are buckets of their own; the ``n_points - 2``
    points between them are split into ``n_out - 2`` runs of equal size (to
    within one point): bucket ``i`` is ``[bounds[i], bounds[i + 1])`` with
    ``bounds[i] = 1 + floor(i (n_points - 2) / (n_out - 2))``, computed in
    integers so that no rounding moves a boundary.
    """
    inner = n_out - 2
    i = np.arange(inner + 1, dtype=np.int64)
    return 1 + (i * (n_points - 2)) // inner


def lttb(x, y, n_out: int) -> np.ndarray:
    """Indices of the points kept by largest-triangle-three-buckets.

    The first and last points are always kept.  The points between are split
    into ``n_out - 2`` equal buckets in order (:func:`bucket_bounds`); from each
    bucket, in turn, the point is kept that makes the largest triangle with
    the point kept from the previous bucket and the mean of the next bucket
    (for the last bucket, the last point).  On equal areas the earlier point
    wins.

    Parameters
    ----------
    x, y : array_like, shape (n,)
        The curve, in any units (e.g. temperature in K and moment in A m^2).
        Points where x or y is NaN or infinite are dropped first.
    n_out : int
        Number of points wanted, at least 2.  When the curve has no more than
        ``n_out`` finite points, all of them are returned.

    Returns
    -------
    ndarray of int64
        Sorted indices into the original ``x`` and ``y``.

    Notes
    -----
    The choice in bucket ``i`` depends on the choice in bucket ``i - 1``.  For
    short buckets, every (previous candidate, candidate) pair is evaluated at
    once in numpy, and the sequential part reduces to following a table of
    best successors; long buckets are handled one at a time, each vectorised.
    Both give exactly the algorithm's result.

    References
    ----------
    Steinarsson, S. (2013). Downsampling Time Series for Visual
    Representation. MSc thesis, University of Iceland.
    """
    if isinstance(n_out, bool) or not isinstance(n_out, (int, np.integer)):
        raise InvalidValue(f"n_out: expected a whole number of points, got {n_out!r}", field="n_out")
    if n_out < 2:
        raise InvalidValue(f"n_out: at least 2 points are kept (first and last), got {n_out}",
                           field="n_out")
    xs = np.asarray(x, dtype=float)
    ys = np.asarray(y, dtype=float)
    if xs.ndim != 1 or xs.shape != ys.shape:
        raise InvalidValue(f"x, y: expected two 1-D arrays of the same length, got shapes "
                           f"{xs.shape} and {ys.shape}", field="x")
    finite = np.isfinite(xs) & np.isfinite(ys)
    keep = np.flatnonzero(finite)
    if keep.size <= n_out:
        return keep.astype(np.int64)
    if keep.size < xs.size:
        xs, ys = xs[keep], ys[keep]
    chosen = _lttb_finite(xs, ys, int(n_out))
    return keep[chosen].astype(np.int64)


def _lttb_finite(x: np.ndarray, y: np.ndarray, n_out: int) -> np.ndarray:
    n = x.size
    if n_out == 2:
        return np.array([0, n - 1], dtype=np.int64)
    bounds = bucket_bounds(n, n_out)
    n_buckets = n_out - 2
    sizes = np.diff(bounds)
    width = int(sizes.max())

    # Mean of each "next" bucket: bucket i + 1 for i < last, the last point for the last.
    sums_x = np.add.reduceat(x[1:n - 1], bounds[:-1] - 1)
    sums_y = np.add.reduceat(y[1:n - 1], bounds[:-1] - 1)
    next_x = np.append(sums_x[1:] / sizes[1:], x[n - 1])
    next_y = np.append(sums_y[1:] / sizes[1:], y[n - 1])

    if width <= _PAIR_TABLE_MAX_WIDTH and n_buckets * width * width <= _PAIR_TABLE_LIMIT:
        picks = _by_successor_table(x, y, bounds, sizes, width, next_x, next_y)
    else:
        picks = _bucket_by_bucket(x, y, bounds, next_x, next_y)
    return np.concatenate(([0], picks, [n - 1])).astype(np.int64)


def _triangle_areas(ax, ay, bx, by, cx, cy):
    """Twice the triangle area |(b - a) x (c - a)|; the factor 1/2 changes no choice."""
    return np.abs((bx - ax) * (cy - ay) - (by - ay) * (cx - ax))


def _by_successor_table(x, y, bounds, sizes, width, next_x, next_y) -> np.ndarray:
    n_buckets = sizes.size
    # Padded (bucket, slot) index grid.  Slots past a bucket's end repeat the
    # bucket's first point: equal area, later slot, so argmax never picks them.
    slot = np.arange(width)
    idx = bounds[:-1, None] + slot[None, :]
    idx = np.where(slot[None, :] < sizes[:, None], idx, bounds[:-1, None])
    bx, by = x[idx], y[idx]

    # First bucket: the previous kept point is point 0, fixed.
    first = int(np.argmax(_triangle_areas(x[0], y[0], bx[0], by[0], next_x[0], next_y[0])))
    if n_buckets == 1:
        return np.array([idx[0, first]])

    # For buckets 1.., every candidate a (previous bucket, slot p) against every
    # candidate b (this bucket, slot q): best[i][p] = argmax_q area(a_p, b_q, c_i),
    # c_i the next-bucket mean.  The same arithmetic as the bucket-by-bucket loop,
    # so both paths break near-ties identically.
    ax, ay = bx[:-1, :, None], by[:-1, :, None]
    cx, cy = next_x[1:, None, None], next_y[1:, None, None]
    areas = bx[1:, None, :] - ax          # in place below: fewer large temporaries
    areas *= cy - ay
    second = by[1:, None, :] - ay
    second *= cx - ax
    areas -= second
    np.abs(areas, out=areas)
    best = np.argmax(areas, axis=2).tolist()  # plain lists: fast scalar look-ups below

    slots = [first]
    current = first
    for row in best:
        current = row[current]
        slots.append(current)
    return idx[np.arange(n_buckets), np.array(slots)]


def _bucket_by_bucket(x, y, bounds, next_x, next_y) -> np.ndarray:
    picks = np.empty(bounds.size - 1, dtype=np.int64)
    a = 0
    for i in range(bounds.size - 1):
        lo, hi = int(bounds[i]), int(bounds[i + 1])
        areas = _triangle_areas(x[a], y[a], x[lo:hi], y[lo:hi], next_x[i], next_y[i])
        a = lo + int(np.argmax(areas))
        picks[i] = a
    return picks
