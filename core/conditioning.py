"""Image conditioning before correlation: glare masked, a background removed, intensity evened.

PIV practice conditions the particle images before correlating them (common practice):

- **glare**: pixels at the camera's saturation level over an area larger than any particle
  image (a glint on the ball, a reflection off the launcher) carry no particle pattern; they
  are masked with a margin for their halo. Particle images that merely touch saturation are
  small and stay;
- **background**: light that does not move with the air (fixed reflections, a lit wall, the
  camera's offset) is taken away by subtracting a background image, the per-pixel minimum or
  median of several frames taken at the same camera position (the ball and the particles move
  between them, the reflections do not);
- **local normalisation**: the sheet is brighter in some parts of the picture than in others,
  and a correlation window is dominated by its brightest particles; subtracting a local minimum
  and dividing by the local range (max - min) over a window of a few particle spacings evens the
  particle images' contrast across the picture (the min-max filter).

All functions take and return ``(H, W)`` arrays in counts (normalised frames: 0..1).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from scipy import ndimage

from core import WakelineError
from core.settings import BACKGROUND_METHODS

#: Saturated regions smaller than this (px) are particle images touching saturation, not glare:
#: a particle image of e^-2 diameter 5 px four times brighter than full scale saturates over
#: about 14 px (derived from its Gaussian profile).
MIN_GLARE_AREA_PX = 24
#: Share of the frame's maximum from which a pixel counts as saturated.
SATURATED_SHARE = 0.98
#: The glare's halo: each region is grown by this share of its equivalent radius (at least 3 px).
GLARE_HALO_SHARE = 1.0
#: Mean particle spacing (px) beyond which local normalisation is not applied: on synthetic
#: shots seeded at 0.02 particles per pixel (spacing about 8.5 px by :func:`particle_spacing_px`)
#: it raised the vectors' RMS error by a sixth, where on 0.06 ppp it lowered it by as much.
SPARSE_SPACING_PX = 8.0


def glare_mask(frame: np.ndarray, *, level: float | None = None,
               min_area_px: int = MIN_GLARE_AREA_PX) -> np.ndarray:
    """Glare: saturated regions larger than a particle image, grown by their halo, ``(H, W)`` bool.

    Parameters
    ----------
    frame : (H, W) ndarray
        One frame (counts).
    level : float, optional
        The camera's saturation level (counts); default the frame's maximum (a frame without
        glare then has no saturated region of glare size either).
    min_area_px : int
        Smallest saturated area (px) taken for glare.
    """
    image = np.asarray(frame)
    top = float(image.max()) if level is None else float(level)
    mask = np.zeros(image.shape, dtype=bool)
    if not top > 0:
        return mask
    # flat indices: np.nonzero on a 2-D mask costs about fifteen times more on a large frame
    flat = np.flatnonzero(image >= SATURATED_SHARE * top)
    if flat.size < min_area_px:
        return mask
    ys, xs = np.divmod(flat, image.shape[1])
    # saturated pixels are few: group them by 16 px cells first, and label pixels only around
    # the groups large enough for glare (labelling the whole frame costs far more)
    cell = 16
    grid = np.zeros((image.shape[0] // cell + 1, image.shape[1] // cell + 1), dtype=np.int64)
    np.add.at(grid, (ys // cell, xs // cell), 1)
    groups, count = ndimage.label(grid > 0, structure=np.ones((3, 3)))
    totals = ndimage.sum(grid, groups, index=np.arange(1, count + 1))
    for index, box in enumerate(ndimage.find_objects(groups), start=1):
        if totals[index - 1] < min_area_px:
            continue
        y0, x0 = box[0].start * cell, box[1].start * cell
        y1, x1 = box[0].stop * cell, box[1].stop * cell
        _grow_glare(image[y0:y1, x0:x1] >= SATURATED_SHARE * top, mask, (y0, x0), min_area_px)
    return mask


def _grow_glare(saturated: np.ndarray, mask: np.ndarray, origin, min_area_px: int) -> None:
    """Mark in ``mask`` each saturated region of ``saturated`` (a window of it at ``origin``)
    of at least ``min_area_px`` pixels, grown by its halo. A loop over the few glare regions
    (not over pixels): each is grown by its own halo."""
    labels, _ = ndimage.label(saturated)
    areas = np.bincount(labels.ravel())
    for index, region in enumerate(ndimage.find_objects(labels), start=1):
        if region is None or areas[index] < min_area_px:
            continue
        grow = max(3, math.ceil(GLARE_HALO_SHARE * math.sqrt(areas[index] / math.pi)))
        y0 = max(0, origin[0] + region[0].start - grow)
        x0 = max(0, origin[1] + region[1].start - grow)
        y1 = min(mask.shape[0], origin[0] + region[0].stop + grow)
        x1 = min(mask.shape[1], origin[1] + region[1].stop + grow)
        blob = np.zeros((y1 - y0, x1 - x0), dtype=bool)
        ly, lx = np.nonzero(labels[region] == index)
        blob[ly + origin[0] + region[0].start - y0, lx + origin[1] + region[1].start - x0] = True
        mask[y0:y1, x0:x1] |= ndimage.distance_transform_edt(~blob) <= grow


def background_image(frames: Sequence[np.ndarray] | np.ndarray, method: str = "min") -> np.ndarray:
    """Background of a camera position: the per-pixel minimum or median over several frames.

    The minimum keeps only light present in every frame (fixed reflections, the camera offset);
    the median also ignores a few frames with a stray object in them but keeps some particle
    light when the seeding is dense. Frames of shots at the same camera position, where the ball
    is elsewhere in the picture, give the cleanest background.

    Parameters
    ----------
    frames : sequence of (H, W) ndarray, or (N, H, W) ndarray
        At least two frames of the same shape.
    method : "min" or "median"

    Returns
    -------
    (H, W) ndarray of float32
    """
    stack = [np.asarray(f, dtype=np.float32) for f in frames]
    if len(stack) < 2:
        raise WakelineError("background: needs at least two frames")
    if any(f.shape != stack[0].shape or f.ndim != 2 for f in stack):
        raise WakelineError("background: the frames differ in shape")
    if method == "min":
        out = stack[0].copy()
        for f in stack[1:]:
            np.minimum(out, f, out=out)
        return out
    if method == "median":
        return np.median(np.stack(stack), axis=0).astype(np.float32)
    known = " or ".join(BACKGROUND_METHODS)
    raise WakelineError(f"background: unknown method {method!r} (use {known})")


def subtract_background(
    frame: np.ndarray, background: np.ndarray, name: str = "frame"
) -> np.ndarray:
    """``frame - background`` clipped at zero, float32."""
    frame = np.asarray(frame, dtype=np.float32)
    background = np.asarray(background, dtype=np.float32)
    if background.shape != frame.shape:
        raise WakelineError(
            f"{name}: background image is {background.shape[1]}x{background.shape[0]}, "
            f"the frame {frame.shape[1]}x{frame.shape[0]}"
        )
    return np.clip(frame - background, 0.0, None)


#: A background is taken for one of the frames when that frame's particle images explain its
#: fine texture: regressed on frames A's and B's, one of the two takes at least this share of
#: the weight and the two explain at least this share of the texture. A background shares the
#: fixed light with both frames alike (a minimum or median of their shot's frames included:
#: measured shares under 0.02), a frame its own particle images (a share of 1).
SAME_FRAME_SHARE = 0.5


def background_problem(background: np.ndarray, frames) -> str:
    """Why ``background`` is no background for the frame pair ``frames`` (two (name, image)
    pairs), or "": its fine texture (what a 2 px Gaussian smooths away, on a central crop) is
    one frame's, at any gain: subtracted, it would take that frame's particle images away.

    Fixed light (reflections, a lit wall, the camera's pattern) is in both frames alike and
    in any background, so the test is the asymmetry of ``background ~ alpha A + beta B``:
    ``|alpha - beta| / (|alpha| + |beta|)`` at least ``SAME_FRAME_SHARE``, the fit explaining at
    least that share of the background's texture."""
    (name_a, frame_a), (name_b, frame_b) = frames
    g, a, b = (_fine_texture(image).ravel() for image in (background, frame_a, frame_b))
    normal = np.array([[a @ a, a @ b], [a @ b, b @ b]], dtype=np.float64)
    try:
        alpha, beta = np.linalg.solve(normal, np.array([a @ g, b @ g], dtype=np.float64))
    except np.linalg.LinAlgError:  # a flat frame, or the two frames the same
        return ""
    weight = abs(alpha) + abs(beta)
    explained = 1.0 - float(np.sum((g - alpha * a - beta * b) ** 2)) / max(float(g @ g), 1e-30)
    if not (weight > 0 and abs(alpha - beta) / weight >= SAME_FRAME_SHARE
            and explained >= SAME_FRAME_SHARE):
        return ""
    return (f"its particle images are those of {name_a if abs(alpha) > abs(beta) else name_b}: "
            "a background is the per-pixel minimum or median of frames of several shots at "
            "this camera position")


def _fine_texture(image: np.ndarray) -> np.ndarray:
    """What a 2 px Gaussian smooths away on a central crop of at most 512 x 512 px, its mean
    taken off: the particle images."""
    h, w = image.shape
    y0, x0 = max(0, h // 2 - 256), max(0, w // 2 - 256)
    crop = np.asarray(image[y0 : y0 + 512, x0 : x0 + 512], dtype=np.float32)
    fine = crop - ndimage.gaussian_filter(crop, 2.0)
    return fine - fine.mean()


def particle_spacing_px(frame: np.ndarray) -> float:
    """Mean distance (px) between particle images, ``1 / sqrt(density)``: a rough figure for
    window sizes. The density counts local maxima standing 3 noise deviations above their
    surroundings on a central crop of at most 512 x 512 px (the noise from the median absolute
    deviation of the crop's differences between neighbouring pixels)."""
    image = np.asarray(frame, dtype=np.float32)
    h, w = image.shape
    y0, x0 = max(0, h // 2 - 256), max(0, w // 2 - 256)
    crop = image[y0 : y0 + 512, x0 : x0 + 512]
    noise = 1.4826 * float(np.median(np.abs(np.diff(crop, axis=1)))) / math.sqrt(2.0)
    smooth = ndimage.gaussian_filter(crop, 0.7)
    floor = ndimage.minimum_filter(smooth, 5)
    peaks = (smooth == ndimage.maximum_filter(smooth, 3)) & (smooth - floor > 3.0 * max(noise, 1.0))
    density = np.count_nonzero(peaks) / crop.size
    return 1.0 / math.sqrt(max(density, 1e-4))


def normalise_local(frame: np.ndarray, window_px: float, mask: np.ndarray | None = None,
                    floor_share: float = 0.1) -> np.ndarray:
    """Min-max normalisation: ``(I - local min) / (local max - local min)`` over ``window_px``.

    The local minimum and maximum are taken over blocks of a third of the window, then over
    3 x 3 blocks (the window), smoothed over the blocks and interpolated back to the pixels:
    the envelope is smooth by design (it must not follow single particle images), so this costs
    a few passes over the frame instead of a sliding window's. Where the local range is below
    ``floor_share`` of its median over the frame (unseeded air, a shadow, the ball), the range
    is held at that floor, so camera noise is not blown up to particle contrast. Masked pixels
    (glare) neither set the range nor keep their light: they are 0 in the result.

    Parameters
    ----------
    frame : (H, W) ndarray
        Counts.
    window_px : float
        Window side (px), a few particle spacings (:func:`particle_spacing_px`).
    mask : (H, W) bool ndarray, optional
        Pixels to leave out (glare).

    Returns
    -------
    (H, W) ndarray of float32, mostly in 0..1.
    """
    image = np.asarray(frame, dtype=np.float32)
    block = max(2, round(window_px / 3.0))
    source = image
    if mask is not None and mask.any():
        source = image.copy()
        source[mask] = np.median(image[::7, ::7])
    low = _envelope(source, block, np.min, ndimage.minimum_filter)
    high = _envelope(source, block, np.max, ndimage.maximum_filter)
    span = high - low
    floor = max(floor_share * float(np.median(span)), 1e-6)
    out = _upsample(low, block, image.shape)
    np.subtract(image, out, out=out)
    out /= _upsample(np.maximum(span, floor), block, image.shape)
    if mask is not None:
        out[mask] = 0.0
    return np.clip(out, 0.0, None, out=out)


def _envelope(image: np.ndarray, block: int, reduce, spread) -> np.ndarray:
    """Per-block extreme of ``image`` (edge blocks padded with the edge), spread over 3 x 3
    blocks and smoothed over them, ``(ceil(H / block), ceil(W / block))``."""
    h, w = image.shape
    ph, pw = -h % block, -w % block
    padded = np.pad(image, ((0, ph), (0, pw)), mode="edge") if ph or pw else image
    rows, cols = padded.shape[0] // block, padded.shape[1] // block
    # along rows first (contiguous), then across: faster than one reduction over a 4-D view
    grid = reduce(padded.reshape(padded.shape[0], cols, block), axis=2)
    grid = reduce(grid.reshape(rows, block, cols), axis=1)
    return ndimage.uniform_filter(spread(grid, size=3, mode="nearest"), 3, mode="nearest")


def _upsample(grid: np.ndarray, block: int, shape) -> np.ndarray:
    """Bilinear interpolation of a block grid (values at block centres) to pixels, float32:
    along the rows of the small grid first, then down the columns."""
    g = grid.astype(np.float32)
    for axis, size in ((1, shape[1]), (0, shape[0])):
        pos = np.clip((np.arange(size) - (block - 1) / 2.0) / block, 0, g.shape[axis] - 1)
        lo = np.minimum(pos.astype(int), max(g.shape[axis] - 2, 0))
        hi = np.minimum(lo + 1, g.shape[axis] - 1)
        frac = (pos - lo).astype(np.float32)
        if axis == 1:
            g = g[:, lo] * (1 - frac) + g[:, hi] * frac
        else:
            g = g[lo] * (1 - frac)[:, None] + g[hi] * frac[:, None]
    return g
