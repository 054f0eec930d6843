"""Where prediction bands first leave their limits, for many series at once: the arithmetic of
:func:`analytics.core.drift.forecast_crossing` (a grid over the horizon, then bisection of the
cell before the first flagged point) vectorised over rows, with the grid searched block by
block (a block whose exact bounds rule a criterion out is skipped).

Pure numpy (no Django). Arrays are shape ``(m,)`` per series or ``(m, g)`` over the grid;
x in the series' own unit (km or days), y in the limits' unit.
"""
from __future__ import annotations

import numpy as np

from analytics.core.drift import FORECAST_GRID_POINTS
from analytics.core.stacks import Z95

BISECTIONS = 40  # = analytics.core.drift.CROSSING_BISECTIONS


def centre_half(x, slope, se, xref, yref, rsd, n):
    """A trend's centre line and prediction half-width at ``x`` (as the core's ``LineTrend.band``);
    the one place their operations are written (:func:`block_bounds` relies on them)."""
    return centre_half_of(x, *band_terms(slope, se, xref, yref, rsd, n))


def band_terms(slope, se, xref, yref, rsd, n) -> tuple:
    """The parts of :func:`centre_half` that do not depend on ``x``, for evaluating one set of
    trends at many ``x`` (each part is computed exactly as :func:`centre_half` computes it)."""
    return slope, xref, yref, rsd**2 * (1.0 + 1.0 / n), se**2


def centre_half_of(x, slope, xref, yref, a2, s2):
    d = x - xref
    return yref + slope * d, Z95 * np.sqrt(a2 + s2 * d**2)


def band(x, slope, se, xref, yref, rsd, n):
    centre, half = centre_half(x, slope, se, xref, yref, rsd, n)
    return centre - half, centre, centre + half


#: Grid columns per block of the bounded first-crossing search (:func:`first_flags`).
FLAG_BLOCK = 32


class LinspaceGrid:
    """``np.linspace(start, stop, num, axis=1)`` — shape ``(m, num)`` — without building it: the
    elements asked for are computed by numpy's own arithmetic for that call (numpy 2,
    ``numpy/_core/function_base.py``: ``step = (stop − start) / (num − 1)``, element ``j`` is
    ``j · step + start``, or ``(j / (num − 1)) · (stop − start) + start`` for every row when any
    row's step is 0, and the last column is ``stop``), so they are equal to the built grid's,
    element for element (tested against ``np.linspace``). The search below reads a few columns
    of most rows, so building the whole grid (≈ 44 MB for a chunk's 10 800 drift series) cost
    more than everything it was read for.

    Indexing as the search uses an array: ``grid[:, cols]``, ``grid[rows, j0:j1]`` (shape
    ``(len(rows), j1 − j0)``) and ``grid[rows, cols]`` with ``rows`` and ``cols`` of one
    length (element by element)."""

    def __init__(self, start, stop, num: int) -> None:
        if num < 2:
            raise ValueError("a grid needs at least two points")
        self.start = np.asarray(start, dtype=float)
        self.stop = np.asarray(stop, dtype=float)
        self.num = num
        self.shape = (self.start.size, num)
        self.div = num - 1
        with np.errstate(invalid="ignore", over="ignore"):  # NaN and inf pass, as in linspace
            self.delta = np.subtract(self.stop, self.start)
            self.step = self.delta / self.div
        self.zero_step = bool(np.any(self.step == 0))

    def _at(self, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        j = cols.astype(float)
        with np.errstate(invalid="ignore", over="ignore"):
            v = (j / self.div * self.delta[rows] if self.zero_step else j * self.step[rows]) \
                + self.start[rows]
        return np.where(cols == self.num - 1, self.stop[rows], v)

    def __getitem__(self, key) -> np.ndarray:
        rows, cols = key
        if isinstance(cols, slice):
            cols = np.arange(*cols.indices(self.num))
            rows = np.arange(self.shape[0]) if isinstance(rows, slice) else np.asarray(rows)
            return self._at(rows[:, None], cols[None, :])
        cols = np.asarray(cols)
        if isinstance(rows, slice):
            if rows != slice(None):
                raise IndexError("rows: all (':') or an index array")
            return self._at(np.arange(self.shape[0])[:, None], cols[None, :])
        return self._at(np.asarray(rows), cols)


def rising(grid) -> np.ndarray:
    """Per row, whether the grid's values never decrease (``np.all(grid[:, 1:] >= grid[:, :-1],
    axis=1)``), shape ``(m,)``. For a :class:`LinspaceGrid` from three columns: its elements
    before the last are ``j · a + b`` (or ``(j / d) · a + b``) in ``j``, and correctly rounded
    products and sums are monotonic, so they never decrease exactly when the second-to-last is
    not below the first (equal ends of a non-increasing run make the run constant), and the
    last column, ``stop``, must not be below the second-to-last; a NaN fails both (a row with
    a NaN anywhere has one at its first element: finite ``start`` and ``step`` give none)."""
    if isinstance(grid, LinspaceGrid):
        m, g = grid.shape
        ends = grid[:, np.array([0, g - 2, g - 1])]
        return (ends[:, 1] >= ends[:, 0]) & (ends[:, 2] >= ends[:, 1])
    return np.all(grid[:, 1:] >= grid[:, :-1], axis=1)


def block_bounds(grid, slope, se, xref, yref, rsd, n):
    """Bounds of a band's centre and half-width over blocks of :data:`FLAG_BLOCK` grid columns:
    ``(starts, ends, c_min, c_max, h_min, h_max, unbounded)``, the bounds ``(m, blocks)``.

    Computed with :func:`centre_half` itself at each block's end points: every operation is
    correctly rounded and monotonic in its argument (x − x_ref, a product with a fixed factor, a
    sum, a square root), so the computed centre at the grid points is monotonic in x, the
    computed half-width is monotonic on each side of x_ref (least at x_ref), and the bounds hold
    for every grid point of the block, exactly. ``unbounded``: rows whose grid does not rise
    (their bounds are not used)."""
    m, g = grid.shape
    starts = np.arange(0, g, FLAG_BLOCK)
    ends = np.minimum(starts + FLAG_BLOCK, g) - 1
    P = [p[:, None] for p in (slope, se, xref, yref, rsd, n)]
    x0, x1 = grid[:, starts], grid[:, ends]
    c0, h0 = centre_half(x0, *P)
    c1, h1 = centre_half(x1, *P)
    _, h_at_ref = centre_half(xref[:, None], *P)
    h_min = np.where((x0 <= xref[:, None]) & (x1 >= xref[:, None]), h_at_ref, np.minimum(h0, h1))
    unbounded = ~rising(grid)
    return (starts, ends, np.minimum(c0, c1), np.maximum(c0, c1), h_min, np.maximum(h0, h1),
            unbounded)


def scan_blocks(starts, ends, possible: list[np.ndarray], evaluate
                ) -> list[tuple[np.ndarray, np.ndarray]]:
    """Each criterion's ``(any flagged, first flagged index)`` per row, evaluating only blocks
    where ``possible[c][row, block]``, in grid order, until each row's first flag is found.
    ``evaluate(rows, j0, j1)``: the exact flags of columns ``j0:j1`` of those rows, one
    ``(r, j1 − j0)`` array per criterion."""
    m = possible[0].shape[0]
    found = [np.zeros(m, dtype=bool) for _ in possible]
    first = [np.zeros(m, dtype=np.int64) for _ in possible]
    for k, (j0, j1) in enumerate(zip(starts, ends + 1, strict=True)):
        need = np.zeros(m, dtype=bool)
        for c, p in enumerate(possible):
            need |= ~found[c] & p[:, k]
        rows = np.nonzero(need)[0]
        if not rows.size:
            continue
        for c, flags in enumerate(evaluate(rows, j0, j1)):
            hit = flags.any(axis=1) & ~found[c][rows]
            r = rows[hit]
            first[c][r] = j0 + np.argmax(flags[hit], axis=1)
            found[c][r] = True
    return list(zip(found, first, strict=True))


def first_flags(grid, P: tuple, lower: np.ndarray, upper: np.ndarray
                ) -> list[tuple[np.ndarray, np.ndarray]]:
    """Per criterion (band edge out, centre out, whole band out): whether any grid point of a row
    is flagged and the first one that is — what ``flags.any(axis=1)`` and ``np.argmax(flags,
    axis=1)`` give on the full ``(m, g)`` grid of :func:`band`, without evaluating every point.

    A block whose bounds (:func:`block_bounds`) rule a criterion out has no flagged point for
    it, exactly; the others are evaluated point by point (:func:`scan_blocks`). The result is
    the full grid's, element for element (tested against it on random and edge-case series).
    ``P``: the six ``(m,)`` band parameters of :func:`band`; ``lower``/``upper``: ``(m,)``
    limits (±inf for none).
    """
    starts, ends, c_min, c_max, h_min, h_max, unbounded = block_bounds(grid, *P)
    up, low = upper[:, None], lower[:, None]
    possible = [(c_max + h_max > up) | (c_min - h_max < low),   # some band edge out
                (c_max > up) | (c_min < low),                   # the centre out
                (c_max - h_min > up) | (c_min + h_min < low)]   # the whole band out
    for flags in possible:
        flags[unbounded] = True

    def evaluate(rows, j0, j1):
        lo, ce, hi = band(grid[rows, j0:j1], *[p[rows, None] for p in P])
        u, w = upper[rows, None], lower[rows, None]
        return (hi > u) | (lo < w), (ce > u) | (ce < w), (lo > u) | (hi < w)

    return scan_blocks(starts, ends, possible, evaluate)


def bisect_first(grid, firsts: list[tuple[np.ndarray, np.ndarray]], make_test,
                 cur: np.ndarray) -> list[np.ndarray]:
    """Per row and criterion: the first x where the criterion holds — the first grid point
    flagged, then ``BISECTIONS`` halvings of the grid cell before it (as the core's
    ``forecast_crossing``); ``cur`` where it holds at the first grid point, NaN where never.

    One bisection loop for every criterion and row at once; each element takes the same steps
    as alone. ``grid``: ``(m, g)`` x values (an array or a :class:`LinspaceGrid`); ``firsts``:
    per criterion, ``(any flagged, first flagged index)``, each ``(m,)`` (:func:`first_flags`,
    :func:`scan_blocks`);
    ``make_test(rows, which)``: a function of ``x`` giving whether criterion ``which[j]`` holds
    for row ``rows[j]`` at ``x[j]`` (all shape ``(r,)``), called once per halving (the rows'
    parameters are gathered once, not at every halving). Returns one ``(m,)`` array per
    criterion."""
    outs, A, B, R, C = [], [], [], [], []
    for c, (anyf, i) in enumerate(firsts):
        out = np.full(grid.shape[0], np.nan)
        at0 = anyf & (i == 0)
        out[at0] = cur[at0]
        rows = np.nonzero(anyf & (i > 0))[0]
        outs.append(out)
        A.append(grid[rows, i[rows] - 1])
        B.append(grid[rows, i[rows]])
        R.append(rows)
        C.append(np.full(rows.size, c))
    a, b, rows, which = (np.concatenate(v) for v in (A, B, R, C))
    if rows.size:
        test = make_test(rows, which)
        for _ in range(BISECTIONS):
            mid = 0.5 * (a + b)
            hit = test(mid)
            b = np.where(hit, mid, b)
            a = np.where(hit, a, mid)
        for c, out in enumerate(outs):
            m = which == c
            out[rows[m]] = b[m]
    return outs


def crossings(slope, se, xref, yref, rsd, n, *, current, lower, upper, horizon):
    """Vectorised :func:`~analytics.core.drift.forecast_crossing` (all arguments shape ``(m,)``;
    ``lower``/``upper`` ±inf for no limit). Returns ``(early, likely, late, side_upper)`` with
    NaN for "not within the horizon"."""
    P = (slope, se, xref, yref, rsd, n)

    def make_test(rows, which):  # 0: band edge out, 1: centre out, 2: whole band out
        terms = band_terms(*[p[rows] for p in P])
        up, low = upper[rows], lower[rows]
        edge, centre = which == 0, which == 1

        def test(x):
            c, half = centre_half_of(x, *terms)
            lo, hi = c - half, c + half
            return np.where(edge, (hi > up) | (lo < low),
                            np.where(centre, (c > up) | (c < low), (lo > up) | (hi < low)))
        return test

    grid = LinspaceGrid(current, current + horizon, FORECAST_GRID_POINTS)
    early, likely, late = bisect_first(grid, first_flags(grid, P, lower, upper), make_test,
                                        current)
    e = np.where(np.isfinite(early), early, current)
    blo, _, bhi = band(e, *P)
    side_upper = (bhi - upper) >= (lower - blo)
    return early, likely, late, side_upper
