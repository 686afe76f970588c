"""Outlier detection (normalised median test) and replacement for displacement grids.

The normalised median test compares each vector with the median of its 8 neighbours, scaled by
the median of the neighbours' own residuals plus a noise floor ``eps``:
``r0 = |u0 - um| / (median_i |ui - um| + eps)``, per component; a vector whose ``r0`` exceeds
the threshold in either component is an outlier (Westerweel & Scarano 2005, Exp. Fluids 39:1096).
"""

from __future__ import annotations

import numpy as np

#: Fewest usable neighbours for a vector to be judged at all; with fewer the median is a guess.
MIN_NEIGHBOURS = 3

_OFFSETS = [(dr, dc) for dr in (-1, 0, 1) for dc in (-1, 0, 1) if (dr, dc) != (0, 0)]


def neighbour_stack(values: np.ndarray) -> np.ndarray:
    """The 8 neighbours of every cell, NaN beyond the edge.

    Parameters
    ----------
    values : (M, N) ndarray

    Returns
    -------
    (8, M, N) ndarray of float64
    """
    m, n = values.shape
    padded = np.full((m + 2, n + 2), np.nan)
    padded[1:-1, 1:-1] = values
    return np.stack([padded[1 + dr : 1 + dr + m, 1 + dc : 1 + dc + n] for dr, dc in _OFFSETS])


def nanmedian_first_axis(stack: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Median along axis 0 ignoring NaN, and the count of finite values (NaN where none).

    Written out (sort, then pick) so that all-NaN cells give NaN without a warning.
    """
    count = np.count_nonzero(np.isfinite(stack), axis=0)
    ordered = np.sort(stack, axis=0)  # NaN sort last
    lo = np.clip((count - 1) // 2, 0, None)
    hi = np.clip(count // 2, 0, stack.shape[0] - 1)
    a = np.take_along_axis(ordered, lo[None], axis=0)[0]
    b = np.take_along_axis(ordered, hi[None], axis=0)[0]
    median = np.where(count > 0, 0.5 * (a + b), np.nan)
    return median, count


def extrapolated_stack(values: np.ndarray) -> np.ndarray:
    """Estimates of every cell from each of the 8 directions by straight-line extrapolation
    from the two nearest cells that way, ``2 u(c + o) - u(c + 2 o)``; NaN where either is
    missing. Exact on a linear field whichever side the cells lie.

    Parameters
    ----------
    values : (M, N) ndarray

    Returns
    -------
    (8, M, N) ndarray of float64
    """
    m, n = values.shape
    padded = np.full((m + 4, n + 4), np.nan)
    padded[2:-2, 2:-2] = values

    def shifted(dr, dc):
        return padded[2 + dr : 2 + dr + m, 2 + dc : 2 + dc + n]

    return np.stack([2.0 * shifted(dr, dc) - shifted(2 * dr, 2 * dc) for dr, dc in _OFFSETS])


def normalized_median_test(
    dx: np.ndarray,
    dy: np.ndarray,
    threshold: float = 2.0,
    eps: float = 0.1,
    valid: np.ndarray | None = None,
    *,
    extrapolate_edges: bool = False,
) -> np.ndarray:
    """Flag outliers with the normalised median test over the 8 neighbours.

    Parameters
    ----------
    dx, dy : (M, N) ndarray
        Displacement components, px. NaN cells take no part.
    threshold : float
        Largest accepted normalised residual (2 is customary).
    eps : float
        Noise floor of the residual median, px (about the random error, 0.1-0.2 px).
    valid : (M, N) bool ndarray, optional
        Cells that take part (e.g. not masked); default: all finite cells.
    extrapolate_edges : bool
        For cells missing some of their 8 neighbours (grid edge, mask, holes), test against
        the straight-line extrapolations of :func:`extrapolated_stack` instead of the
        neighbours themselves. With neighbours on one side only, the plain test mistakes a
        uniform gradient for an outlier (the median lies a whole gradient step away); the
        extrapolations do not. Cells with all 8 neighbours get the plain test either way; an
        edge cell with too few extrapolations is not judged.

    Returns
    -------
    (M, N) bool ndarray
        True where the vector is an outlier. Cells that do not take part, or that have fewer
        than ``MIN_NEIGHBOURS`` usable neighbours (or estimates), are never flagged.
    """
    usable = np.isfinite(dx) & np.isfinite(dy)
    if valid is not None:
        usable &= np.asarray(valid, dtype=bool)
    outlier = np.zeros(dx.shape, dtype=bool)
    for comp in (dx, dy):
        values = np.where(usable, comp, np.nan)
        residual, count = _normalised_residual(values, neighbour_stack(values), eps)
        judged = usable & (count >= MIN_NEIGHBOURS)
        if extrapolate_edges:
            edge = usable & (count < 8)
            far, far_count = _normalised_residual(values, extrapolated_stack(values), eps)
            residual = np.where(edge, far, residual)
            judged = np.where(edge, far_count >= MIN_NEIGHBOURS, judged)
        outlier |= judged & (residual > threshold)
    return outlier


def _normalised_residual(values: np.ndarray, neighbours: np.ndarray, eps: float):
    """``|u0 - um| / (median |ui - um| + eps)`` per cell (0 where undefined) and the count."""
    median, count = nanmedian_first_axis(neighbours)
    spread, _ = nanmedian_first_axis(np.abs(neighbours - median[None]))
    with np.errstate(invalid="ignore"):
        residual = np.abs(values - median) / (spread + eps)
    return np.where(np.isfinite(residual), residual, 0.0), count


def replace_outliers(
    dx: np.ndarray,
    dy: np.ndarray,
    outliers: np.ndarray,
    masked: np.ndarray | None = None,
    *,
    relax: bool = True,
) -> tuple[np.ndarray, np.ndarray]:
    """Replace outliers (and NaN holes) by the mean of their usable neighbours, iteratively.

    Holes are filled from the outside in: each round fills the holes with the most usable
    neighbours (at least 3 when any hole has that many), so a filled value rests on measured
    ones where possible; with ``relax`` the filled values are then relaxed to the mean of their
    4 neighbours (a discrete Laplace fill, exact on linear fields). Masked cells are neither
    used nor filled: they stay NaN. Work grows with the number of holes, not the grid.

    Parameters
    ----------
    dx, dy : (M, N) ndarray
        Displacement components, px.
    outliers : (M, N) bool ndarray
        Cells to replace.
    masked : (M, N) bool ndarray, optional
        Cells with no vector.
    relax : bool
        Relax the filled values (Laplace); off gives the plain outside-in neighbour mean.

    Returns
    -------
    dx, dy : (M, N) ndarray of float64
        New arrays; a hole with no usable neighbour anywhere stays NaN.
    """
    m, n = dx.shape
    masked = np.zeros((m, n), bool) if masked is None else np.asarray(masked, dtype=bool)
    values = []
    for comp in (dx, dy):
        padded = np.full((m + 2, n + 2), np.nan)
        padded[1:-1, 1:-1] = np.where(outliers | masked, np.nan, comp)
        values.append(padded)
    missing = ~(np.isfinite(values[0]) & np.isfinite(values[1]))[1:-1, 1:-1]
    hole_rows, hole_cols = np.nonzero(missing & ~masked)
    holes = (hole_rows + 1) * (n + 2) + hole_cols + 1  # flat indices in the padded grid
    for padded in values:
        padded.flat[holes] = np.nan
    filled = _fill_outside_in(values, holes, n + 2)
    if relax:
        for padded in values:
            _relax(padded, filled, n + 2)
    return values[0][1:-1, 1:-1].copy(), values[1][1:-1, 1:-1].copy()


def _fill_outside_in(values: list[np.ndarray], holes: np.ndarray, stride: int) -> np.ndarray:
    """Fill holes (flat indices into the padded grids) from their 8 neighbours, best-supported
    first; returns the indices that were filled."""
    offsets = np.array([dr * stride + dc for dr, dc in _OFFSETS])
    todo = holes
    done = []
    while todo.size:
        near = [padded.flat[todo[:, None] + offsets] for padded in values]
        count = np.count_nonzero(np.isfinite(near[0]), axis=1)
        best = int(count.max())
        if best == 0:
            break
        fill = count >= min(best, MIN_NEIGHBOURS)
        for padded, nb in zip(values, near, strict=True):
            padded.flat[todo[fill]] = np.nansum(nb[fill], axis=1) / count[fill]
        done.append(todo[fill])
        todo = todo[~fill]
    return np.concatenate(done) if done else np.zeros(0, np.intp)


def _relax(
    padded: np.ndarray, cells: np.ndarray, stride: int, tol_px: float = 1e-3, rounds: int = 500
) -> None:
    """Relax ``cells`` (flat indices, in place) toward the mean of their 4 neighbours, a
    discrete Laplace fill exact on linear fields, starting from the outside-in fill."""
    if cells.size == 0:
        return
    offsets = np.array([-stride, stride, -1, 1])
    index = cells[:, None] + offsets
    for _ in range(rounds):
        near = padded.flat[index]
        count = np.count_nonzero(np.isfinite(near), axis=1)
        new = np.nansum(near, axis=1) / np.maximum(count, 1)
        new = np.where(count > 0, new, padded.flat[cells])
        change = float(np.max(np.abs(new - padded.flat[cells]), initial=0.0))
        padded.flat[cells] = new
        if change < tol_px:
            return
