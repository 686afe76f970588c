"""Coarse: the ball as a round region without particle images (block variance, Hough)."""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage
from skimage.filters import threshold_otsu
from skimage.measure import CircleModel

from core import WakelineError

# --- coarse: a round region without particle images -----------------------------------------


_DISC2 = np.hypot(*np.mgrid[-2:3, -2:3]) <= 2.0


def _bin2(image: np.ndarray) -> np.ndarray:
    """Means of 2 x 2 pixels, ``(H // 2, W // 2)``."""
    h, w = (s // 2 * 2 for s in image.shape)
    # strided sums: several times faster than a mean over the axes of a 4-D view (in place:
    # no temporary per term)
    total = image[0:h:2, 0:w:2] + image[1:h:2, 0:w:2]
    total += image[0:h:2, 1:w:2]
    total += image[1:h:2, 1:w:2]
    total *= 0.25
    return total


def _block_variance(image: np.ndarray, factor: int) -> np.ndarray:
    """Intensity variance within ``factor`` x ``factor`` blocks, ``(H // f, W // f)``."""
    h, w = (s // factor * factor for s in image.shape)
    blocks = image[:h, :w].reshape(h // factor, factor, w // factor, factor)
    mean = blocks.mean(axis=(1, 3), dtype=np.float64)
    square = np.square(blocks, dtype=np.float64).mean(axis=(1, 3))
    return np.clip(square - mean * mean, 0.0, None)


def coarse_circle(
    image: np.ndarray, radius_hint_px: float | None, name: str
) -> tuple[float, float, float, int]:
    """Centre and radius (px) of the best-supported round particle-free region, and the block
    size (px) they were found on (their error is about a block)."""
    factor = 2 * max(2, round(min(image.shape) / 256))
    # variance of 2 x 2 pixel means: averaging quarters the camera noise's variance but keeps
    # most of a particle image's (it spans 2-3 px), so dim particles stand out better; summed
    # over 5 x 5 blocks, so that sparse seeding still puts a few particles in each sum
    variance = ndimage.uniform_filter(_block_variance(_bin2(image), factor // 2), 5, mode="nearest")
    texture = np.log(variance + 1e-6 * float(np.median(variance)) + 1e-12)
    if np.ptp(texture) < 1.0:
        raise WakelineError(f"{name}: no ball found (the picture has no particle images)")
    # the air's texture relative to the brightest seeded air around it (an uneven sheet lights
    # one part of the picture several times more than another); then, for a ball too large for
    # that window, as it is
    window = max(5, int(0.6 * min(texture.shape)))
    reference = ndimage.gaussian_filter(ndimage.maximum_filter(texture, window), window / 4)
    # Both are searched and the better supported circle kept: next to a bright ball the
    # outline's step is the most "textured" thing in the window, so relative to it the air
    # nearby looks quiet, most of all with small or faint particle images.
    found = []
    for level in (texture - reference, texture):
        quiet = level < threshold_otsu(level)
        # single quiet blocks between sparse particles are no ball; a seam's textured band
        # across the ball (its line and stitches) does not split it
        quiet = ndimage.binary_opening(quiet)
        quiet = ndimage.binary_closing(quiet, _DISC2, border_value=1)
        edges = _quiet_edges(quiet, level)
        if edges is None:
            continue
        radii = _radius_range(quiet.shape, radius_hint_px, factor)
        if radii.size == 0:
            raise WakelineError(f"{name}: no ball found (the hinted radius does not fit the frame)")
        best = _hough_best(*edges, radii, quiet)
        if best is not None:
            found.append(best)
    if not found:
        hint = "" if radius_hint_px is None else f" near radius {radius_hint_px:.0f} px"
        raise WakelineError(
            f"{name}: no ball found (no round region without particle images{hint})"
        )
    xc, yc, rc = max(found, key=lambda item: item[1])[0]
    # the variance summed over 5 x 5 blocks is high wherever the sum reaches the air, so the
    # quiet region's edge lies about two blocks inside the outline (2.4 blocks measured on
    # synthetic balls of 30-300 px)
    return (xc + 0.5) * factor - 0.5, (yc + 0.5) * factor - 0.5, (rc + 2.5) * factor, factor


def _quiet_edges(quiet: np.ndarray, level: np.ndarray):
    """Edge blocks of the quiet region (the picture's border left out) and their unit normals
    toward the textured side, or None when there are too few."""
    edge = quiet & ~ndimage.binary_erosion(quiet, border_value=1)
    edge[0, :] = edge[-1, :] = edge[:, 0] = edge[:, -1] = False
    ey, ex = np.nonzero(edge)
    gy, gx = np.gradient(ndimage.gaussian_filter(level, 1.0))
    norm = np.hypot(gx[ey, ex], gy[ey, ex])
    ok = norm > 0
    if np.count_nonzero(ok) < 12:
        return None
    return ex[ok], ey[ok], gx[ey, ex][ok] / norm[ok], gy[ey, ex][ok] / norm[ok]


def _radius_range(shape, radius_hint_px, factor) -> np.ndarray:
    """Radii (blocks) searched: 3 blocks up to 3/4 of the picture, or within 25 % of the hint."""
    r_lo, r_hi = 3.0, 0.75 * max(shape)
    if radius_hint_px is not None:
        r_lo = max(r_lo, 0.75 * radius_hint_px / factor)
        r_hi = min(r_hi, 1.25 * radius_hint_px / factor)
    return np.arange(math.floor(r_lo), math.ceil(r_hi) + 1, dtype=np.float64)


def _hough_best(ex, ey, nx, ny, radii, quiet):
    """Circle (blocks) best supported by quiet-region edge points voting along their normals,
    and its score; None when no circle qualifies.

    Two stages (a gradient Hough transform): every edge point votes, weighted by one over the
    circumference, for the centres one radius inward along its normal (the direction from
    quiet to textured) for every radius in range, so a whole circle of any size gives about 1
    at its centre; then, for the strongest centres, the edge points facing them vote for the
    radius. Written with ``np.bincount`` rather than :func:`skimage.transform.hough_circle`,
    which ignores the normals and costs a full circle of votes per point and radius.
    """
    best, best_score = None, 0.0
    for j, i in _centre_candidates(ex, ey, nx, ny, radii, quiet.shape):
        rx, ry = ex - i, ey - j
        rho = np.hypot(rx, ry)
        facing = (rx * nx + ry * ny) > 0.8 * rho
        hist = np.bincount(np.rint(rho[facing]).astype(np.int64), minlength=int(radii[-1]) + 3)
        hist = ndimage.gaussian_filter1d(hist.astype(np.float64), 1.0)
        span = np.arange(hist.size, dtype=np.float64)
        inside = (span >= radii[0]) & (span <= radii[-1])
        r = float(np.argmax(np.where(inside, hist / np.maximum(span, 1.0), 0.0)))
        circle = _refined(ex, ey, nx, ny, float(i), float(j), r)
        if circle is None or not radii[0] - 3.0 <= circle[2] <= radii[-1] + 3.0:
            continue
        support = circle[3]
        fill, air, seen = _disc_and_ring(quiet, *circle[:3])
        support /= max(seen, 0.25)
        # the air around a ball is textured on at least the lit part of its outline
        if fill < 0.7 or air < 0.25 or support < 0.2:
            continue
        # inside quiet, outside textured, a round edge between them; a larger circle's support
        # is the rarer by chance (more edge points agree)
        score = support * fill * fill * air * air * math.sqrt(circle[2])
        if score > best_score:
            best, best_score = circle[:3], score
    return None if best is None else (best, best_score)


#: Centres tried per octave of radius (:func:`_centre_candidates`).
CENTRES_PER_OCTAVE = 6


def _centre_candidates(ex, ey, nx, ny, radii, shape) -> list[tuple[int, int]]:
    """The strongest centres (blocks, as (row, col)) of the edge points' votes, octave of radius
    by octave: a large ball seen on half its outline (the rest in its laser shadow, whose strip
    runs off the picture) collects about half a vote, less than many small quiet patches
    between sparse particles, each a whole small circle; ranked per octave, it stays among the
    candidates of its own size. Neighbouring octaves share two radii either side, so a ball
    whose radius lies at their boundary keeps its votes together in one of them."""
    candidates = []
    low = radii[0]
    while low <= radii[-1]:
        octave = radii[(radii >= low - 2.0) & (radii < 2.0 * low + 2.0)]
        low *= 2.0
        cx = np.rint(ex[None, :] - octave[:, None] * nx[None, :]).astype(np.int64)
        cy = np.rint(ey[None, :] - octave[:, None] * ny[None, :]).astype(np.int64)
        weight = np.broadcast_to(1.0 / (2.0 * math.pi * octave[:, None]), cx.shape)
        inside = (cx >= 0) & (cy >= 0) & (cx < shape[1]) & (cy < shape[0])
        votes = np.bincount(cy[inside] * shape[1] + cx[inside], weights=weight[inside],
                            minlength=shape[0] * shape[1]).reshape(shape)
        # the normals of a block map scatter by some degrees: sum the votes over a few blocks
        votes = ndimage.gaussian_filter(votes, 1.5) * (2.0 * math.pi * 1.5 * 1.5)
        peaks = (votes == ndimage.maximum_filter(votes, 5)) & (votes > 0.15)
        order = np.argsort(votes[peaks])[::-1][:CENTRES_PER_OCTAVE]
        rows, cols = (a[order] for a in np.nonzero(peaks))
        candidates += [(j, i) for j, i in zip(rows, cols, strict=True)
                       if (j, i) not in candidates]
    return candidates


def _refined(ex, ey, nx, ny, i, j, r, again=True):
    """Circle (blocks) through the edge points near ``(i, j, r)`` whose normals point away
    from its centre (least squares, then again on the points within a block), with the share
    of its outline they cover (64 sectors); None with fewer than 8 such points, or when the
    circle lies more than 3 blocks from ``(i, j, r)`` even after one more look from where it
    went (a centre voted for by half an outline, the rest in a laser shadow, lies a few blocks
    off: the normals of a block map scatter by some degrees)."""
    rx, ry = ex - i, ey - j
    rho = np.hypot(rx, ry)
    near = (np.abs(rho - r) < 3.0) & ((rx * nx + ry * ny) > 0.6 * rho)
    if near.sum() < 8:
        return None
    points = np.column_stack([ex[near], ey[near]]).astype(float)
    model = CircleModel.from_estimate(points)  # least squares, then once more on the closest
    if not model:
        return None
    inliers = np.abs(np.hypot(points[:, 0] - model.center[0], points[:, 1] - model.center[1])
                     - model.radius) < 1.0
    model = CircleModel.from_estimate(points[inliers]) if inliers.sum() >= 8 else None
    if not model:
        return None
    (ci, cj), cr = model.center, model.radius
    if cr <= 0:
        return None
    if abs(cr - r) > 3.0 or math.hypot(ci - i, cj - j) > 3.0:
        return _refined(ex, ey, nx, ny, ci, cj, cr, again=False) if again else None
    theta = np.arctan2(points[inliers, 1] - cj, points[inliers, 0] - ci)
    sectors = np.unique(np.floor((theta + math.pi) / (2 * math.pi) * 64).astype(int) % 64)
    return float(ci), float(cj), float(cr), sectors.size / 64.0


#: Random triples of points tried by :func:`ransac_circle`: in batches, at least
#: ``RANSAC_MIN_TRIALS`` and until a triple of inliers has been drawn with probability
#: ``RANSAC_CONFIDENCE`` at the best inlier share found, at most ``RANSAC_MAX_TRIALS`` (a noisy
#: wide band may hold under a third of inliers, which takes about 300 triples; and a circle
#: through three inliers is itself off by up to the threshold, so more than the first such
#: triple is drawn).
RANSAC_BATCH = 50
RANSAC_MIN_TRIALS = 200
RANSAC_MAX_TRIALS = 400
RANSAC_CONFIDENCE = 0.999


def ransac_circle(points: np.ndarray, threshold: float, start: tuple[float, float, float],
                  reach: float) -> np.ndarray | None:
    """Inliers (within ``threshold`` px) of the circle through three of ``points`` that most
    points support (RANSAC), among circles within ``reach`` px of ``start`` (x, y, r); ties go
    to the smaller sum of squared residuals. None when no triple gives such a circle.

    Each batch of triples is solved and scored at once (skimage's ``ransac`` fits each trial
    through a :class:`skimage.measure.CircleModel`, whose per-call cost took most of the fine
    search on a large ball). The seed is fixed: the same frame always gives the same fit.
    """
    count = len(points)
    if count < 3:
        return None
    rng = np.random.default_rng(12345)
    best, best_key, tried, needed = None, (0, 0.0), 0, RANSAC_MAX_TRIALS
    while tried < min(max(needed, RANSAC_MIN_TRIALS), RANSAC_MAX_TRIALS):
        triples = rng.integers(0, count, size=(RANSAC_BATCH, 3))
        tried += RANSAC_BATCH
        inliers, key = _best_of_triples(points, triples, threshold, start, reach)
        if inliers is not None and (key[0] > best_key[0]
                                    or (key[0] == best_key[0] and key[1] < best_key[1])):
            best, best_key = inliers, key
            share = key[0] / count
            # triples needed to draw one of inliers only with the confidence asked for
            miss = 1.0 - share**3
            needed = (0 if miss <= 0 else
                      math.ceil(math.log(1.0 - RANSAC_CONFIDENCE) / math.log(miss)))
    return best if best is None else _polished(points, best, threshold)


def _polished(points: np.ndarray, inliers: np.ndarray, threshold: float) -> np.ndarray:
    """The inliers after refitting the circle to them while that gains support (a few
    rounds): the best triple's circle is off by up to the threshold, and the circle through
    all its inliers gathers the rest of the outline's points."""
    for _ in range(5):
        model = CircleModel.from_estimate(points[inliers])
        if not model:
            break
        again = np.abs(np.hypot(points[:, 0] - model.center[0], points[:, 1] - model.center[1])
                       - model.radius) < threshold
        if again.sum() <= inliers.sum():
            break
        inliers = again
    return inliers


def _best_of_triples(points, triples, threshold, start, reach):
    """Inliers of the best-supported circle through a batch of triples of points and its
    (inlier count, sum of squared residuals); (None, None) when no circle is within reach."""
    a, b, c = (points[triples[:, k]] for k in range(3))
    # circumcentre of each triple, relative to its first point
    bx, by = (b - a).T
    qx, qy = (c - a).T
    det = 2.0 * (bx * qy - by * qx)
    ok = np.abs(det) > 1e-9  # repeated or collinear points give no circle
    det = np.where(ok, det, 1.0)
    b2, q2 = bx * bx + by * by, qx * qx + qy * qy
    ux, uy = (qy * b2 - by * q2) / det, (bx * q2 - qx * b2) / det
    cx, cy, r = a[:, 0] + ux, a[:, 1] + uy, np.hypot(ux, uy)
    ok &= (np.abs(r - start[2]) <= reach) & (np.hypot(cx - start[0], cy - start[1]) <= reach)
    if not ok.any():
        return None, None
    cx, cy, r = cx[ok], cy[ok], r[ok]
    # inliers by squared distances (r - t)^2 < d^2 < (r + t)^2: no square root over the batch
    dx, dy = points[None, :, 0] - cx[:, None], points[None, :, 1] - cy[:, None]
    d2 = dx * dx + dy * dy
    low = np.maximum(r - threshold, 0.0)
    inliers = (d2 > (low * low)[:, None]) & (d2 < ((r + threshold) ** 2)[:, None])
    inliers |= (r < threshold)[:, None] & (d2 == 0.0)
    support = inliers.sum(axis=1)
    # ties on support go to the smaller sum of squared residuals (over all points)
    tied = np.flatnonzero(support == support.max())
    squares = np.sum((np.sqrt(d2[tied]) - r[tied, None]) ** 2, axis=1)
    best = tied[int(np.argmin(squares))]
    return inliers[best], (int(support[best]), float(squares.min()))


def _disc_and_ring(quiet: np.ndarray, i: float, j: float, r: float) -> tuple[float, float, float]:
    """Quiet share of the disc within 0.85 r, textured share of the ring 1.15-1.6 r on its more
    textured half (both inside the picture), and the share of the circle inside the picture.

    Half the ring: a ball's laser shadow leaves the air on its far side unlit, up to half of
    the ring (the strip behind the ball is as wide as the ball), while the lit side is
    textured all round; a whole-ring share let a larger circle, mostly beyond the picture's
    edge, that takes in the shadow strip outscore the ball itself."""
    reach = math.ceil(1.6 * r + 2)
    y0, y1 = max(0, int(j) - reach), min(quiet.shape[0], int(j) + reach + 1)
    x0, x1 = max(0, int(i) - reach), min(quiet.shape[1], int(i) + reach + 1)
    yy, xx = np.ogrid[y0:y1, x0:x1]
    rho = np.hypot(xx - i, yy - j)
    window = quiet[y0:y1, x0:x1]
    disc, ring = rho <= 0.85 * r, (rho > r + 1.5) & (rho <= 1.6 * r + 2)
    if disc.sum() < 4 or ring.sum() < 4:
        return 0.0, 0.0, 0.0
    theta = np.linspace(0, 2 * math.pi, 64, endpoint=False)
    px, py = i + r * np.cos(theta), j + r * np.sin(theta)
    seen = np.mean((px >= 0) & (py >= 0) & (px <= quiet.shape[1] - 1) & (py <= quiet.shape[0] - 1))
    return float(window[disc].mean()), _textured_half(window, ring, xx - i, yy - j), float(seen)


#: The ring's halves for :func:`_textured_half`: every run of 8 of its 16 sectors.
_HALVES = np.array([np.roll(np.arange(16), -k)[:8] for k in range(16)])


def _textured_half(window, ring, dx, dy) -> float:
    """Textured share of the ring's pixels on the half of it (8 sectors of 16 in a row) where
    it is largest, among the halves with at least 6 of their sectors in the picture (a half
    seen on a sector or two says little); the whole ring's share when no half is."""
    sector = np.floor((np.arctan2(dy, dx) + math.pi) / (2 * math.pi) * 16).astype(int) % 16
    sector = np.broadcast_to(sector, ring.shape)[ring]
    textured = np.bincount(sector, weights=~window[ring], minlength=16)
    counts = np.bincount(sector, minlength=16)
    seen = (counts[_HALVES] > 0).sum(axis=1) >= 6
    if not seen.any():
        return float(textured.sum() / counts.sum())
    shares = textured[_HALVES].sum(axis=1)[seen] / counts[_HALVES].sum(axis=1)[seen]
    return float(np.max(shares))
