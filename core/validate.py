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


def normalized_median_test(
    dx: np.ndarray,
    dy: np.ndarray,
    threshold: float = 2.0,
    eps: float = 0.1,
    valid: np.ndarray | None = None,
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

    Returns
    -------
    (M, N) bool ndarray
        True where the vector is an outlier. Cells that do not take part, or that have fewer
        than ``MIN_NEIGHBOURS`` usable neighbours, are never flagged.
    """
    usable = np.isfinite(dx) & np.isfinite(dy)
    if valid is not None:
        usable &= np.asarray(valid, dtype=bool)
    outlier = np.zeros(dx.shape, dtype=bool)
    for comp in (dx, dy):
        values = np.where(usable, comp, np.nan)
        residual, count = _normalised_residual(values, eps)
        judged = usable & (count >= MIN_NEIGHBOURS)
        outlier |= judged & (residual > threshold)
    return outlier


def _normalised_residual(values: np.ndarray, eps: float) -> tuple[np.ndarray, np.ndarray]:
    neighbours = neighbour_stack(values)
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
) -> tuple[np.ndarray, np.ndarray]:
    """Replace outliers (and NaN holes) by the mean of their usable neighbours, iteratively.

    Holes are filled from the outside in: each round fills the holes with the most usable
    neighbours (at least 3 when any hole has that many), so a filled value rests on measured
    ones where possible; the filled values are then relaxed to the mean of their 4 neighbours
    (a discrete Laplace fill, exact on linear fields). Masked cells are neither used nor
    filled: they stay NaN.

    Parameters
    ----------
    dx, dy : (M, N) ndarray
        Displacement components, px.
    outliers : (M, N) bool ndarray
        Cells to replace.
    masked : (M, N) bool ndarray, optional
        Cells with no vector.

    Returns
    -------
    dx, dy : (M, N) ndarray of float64
        New arrays; a hole with no usable neighbour anywhere stays NaN.
    """
    masked = np.zeros(dx.shape, bool) if masked is None else np.asarray(masked, dtype=bool)
    out_x = np.where(outliers | masked, np.nan, dx).astype(np.float64)
    out_y = np.where(outliers | masked, np.nan, dy).astype(np.float64)
    holes = ~masked & ~(np.isfinite(out_x) & np.isfinite(out_y))
    out_x[holes] = np.nan
    out_y[holes] = np.nan
    todo = holes.copy()
    while np.any(todo):
        filled = _fill_round(out_x, out_y, todo)
        if not np.any(filled):
            break
        todo &= ~filled
    _relax(out_x, holes & ~todo)
    _relax(out_y, holes & ~todo)
    return out_x, out_y


def _relax(values: np.ndarray, cells: np.ndarray, tol_px: float = 1e-3, rounds: int = 500) -> None:
    """Relax ``cells`` (in place) toward the mean of their 4 neighbours (a discrete Laplace
    fill, exact for linear fields), starting from the neighbour-mean fill."""
    if not np.any(cells):
        return
    m, n = values.shape
    for _ in range(rounds):
        padded = np.full((m + 2, n + 2), np.nan)
        padded[1:-1, 1:-1] = values
        near = np.stack([padded[:-2, 1:-1], padded[2:, 1:-1], padded[1:-1, :-2], padded[1:-1, 2:]])
        count = np.count_nonzero(np.isfinite(near), axis=0)
        total = np.nansum(near, axis=0)
        update = cells & (count > 0)
        new = total[update] / count[update]
        change = np.max(np.abs(new - values[update]), initial=0.0)
        values[update] = new
        if change < tol_px:
            return


def _fill_round(out_x: np.ndarray, out_y: np.ndarray, holes: np.ndarray) -> np.ndarray:
    """Fill, in place, the best-supported holes; return which were filled."""
    nx = neighbour_stack(out_x)
    ny = neighbour_stack(out_y)
    count = np.count_nonzero(np.isfinite(nx), axis=0)
    count = np.where(holes, count, 0)
    best = int(count.max())
    if best == 0:
        return np.zeros(holes.shape, bool)
    fill = count >= min(best, MIN_NEIGHBOURS)
    with np.errstate(invalid="ignore"):
        sum_x = np.nansum(nx, axis=0)
        sum_y = np.nansum(ny, axis=0)
    out_x[fill] = sum_x[fill] / count[fill]
    out_y[fill] = sum_y[fill] / count[fill]
    return fill
