"""Sub-pixel correlation peaks: three-point Gaussian fit, overlap-weight correction and the
primary-to-secondary peak ratio."""

from __future__ import annotations

import numpy as np

#: Half-width (px) of the neighbourhood of the primary peak left out when finding the second.
SECOND_PEAK_EXCLUSION_PX = 3


# --- sub-pixel peak ---------------------------------------------------------------------------


def gaussian_peak_offset(r_minus, r0, r_plus) -> np.ndarray:
    """Three-point Gaussian peak offset from the middle sample, in samples.

    ``e = (ln R- - ln R+) / (2 ln R- - 4 ln R0 + 2 ln R+)`` (Willert & Gharib 1991), exact
    for a sampled Gaussian. Where a sample is not positive (logarithm undefined) the
    parabolic estimate is used; where that is degenerate too, 0.

    Parameters
    ----------
    r_minus, r0, r_plus : array_like, same shape
        Correlation values at the peak and its two neighbours along one axis.

    Returns
    -------
    ndarray of float64
    """
    rm, rc, rp = (np.asarray(v, dtype=np.float64) for v in (r_minus, r0, r_plus))
    positive = (rm > 0) & (rc > 0) & (rp > 0)
    lm, lc, lp = (np.log(np.where(positive, v, 1.0)) for v in (rm, rc, rp))
    denom = 2.0 * lm - 4.0 * lc + 2.0 * lp
    ok = positive & (denom < 0)
    gauss = (lm - lp) / np.where(ok, denom, 1.0)
    return np.where(ok, gauss, parabolic_peak_offset(rm, rc, rp))


def parabolic_peak_offset(r_minus, r0, r_plus) -> np.ndarray:
    """Three-point parabolic peak offset ``(R- - R+) / (2 R- - 4 R0 + 2 R+)``; 0 if degenerate."""
    rm, rc, rp = (np.asarray(v, dtype=np.float64) for v in (r_minus, r0, r_plus))
    denom = 2.0 * rm - 4.0 * rc + 2.0 * rp
    ok = denom < 0
    return np.where(ok, (rm - rp) / np.where(ok, denom, 1.0), 0.0)


def correlation_peaks(planes: np.ndarray, floor: float):
    """Sub-pixel peak of every plane: ``(dx (K,), dy (K,), primary/secondary peak ratio (K,))``;
    NaN where the primary peak does not exceed ``floor``."""
    k, size, _ = planes.shape
    flat = planes.reshape(k, size * size)
    index = np.argmax(flat, axis=1)
    row, col = np.divmod(index, size)
    kk = np.arange(k)
    primary = flat[kk, index]
    up, down = planes[kk, (row - 1) % size, col], planes[kk, (row + 1) % size, col]
    left, right = planes[kk, row, (col - 1) % size], planes[kk, row, (col + 1) % size]
    shift_y = (row + size // 2) % size - size // 2
    shift_x = (col + size // 2) % size - size // 2
    dy = shift_y + _unbiased_offset(up, primary, down, shift_y, size)
    dx = shift_x + _unbiased_offset(left, primary, right, shift_x, size)
    ratio = _peak_ratio(planes, row, col, primary)
    bad = ~(primary > floor)
    dx[bad] = np.nan
    dy[bad] = np.nan
    ratio[bad] = np.nan
    return dx, dy, ratio


def _unbiased_offset(r_minus, r0, r_plus, shift, size):
    """Gaussian offset after dividing each sample by its overlap weight ``1 - |s|/D``."""

    def weight(s):
        return np.maximum(1.0 - np.abs(s) / size, 1.0 / size)

    return gaussian_peak_offset(
        r_minus / weight(shift - 1), r0 / weight(shift), r_plus / weight(shift + 1)
    )


def _peak_ratio(planes, row, col, primary):
    """Primary over the highest value outside ``SECOND_PEAK_EXCLUSION_PX`` of the primary."""
    k, size, _ = planes.shape
    reach = min(SECOND_PEAK_EXCLUSION_PX, size // 4)
    offsets = np.arange(-reach, reach + 1)
    rr = (row[:, None] + offsets) % size
    cc = (col[:, None] + offsets) % size
    planes[np.arange(k)[:, None, None], rr[:, :, None], cc[:, None, :]] = -np.inf
    second = planes.reshape(k, -1).max(axis=1)
    floor = 1e-6 * np.abs(primary) + np.finfo(np.float32).tiny
    return primary / np.maximum(second, floor)
