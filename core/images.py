"""Reading and checking frame pairs: two single-page files (TIFF or PNG) or one two-page TIFF.

Colour images are refused rather than converted: a PIV camera records one channel, and a colour
file usually means the wrong export was picked, so guessing a conversion would hide a mistake.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from core import WakelineError

TIFF_SUFFIXES = {".tif", ".tiff"}
PNG_SUFFIXES = {".png"}


def read_frame_pair(path_a: str | Path, path_b: str | Path | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Read a frame pair as two float32 ``(H, W)`` arrays, stored alike (bit depth, scaling).

    Parameters
    ----------
    path_a, path_b : path
        Two single-page images, or ``path_b=None`` and a two-page TIFF in ``path_a``.

    Raises
    ------
    WakelineError
        One line naming the file and the problem.
    """
    if path_b is None:
        pages = _read_pages(Path(path_a))
        if len(pages) != 2:
            raise WakelineError(f"{path_a}: has {len(pages)} page{'s' * (len(pages) > 1)}; a "
                                "frame pair is two (one two-page TIFF, or two files)")
        frame_a, frame_b = pages[0], pages[1]
        name_a, name_b = f"{path_a} page 1", f"{path_a} page 2"
    else:
        frame_a = _single_page(Path(path_a))
        frame_b = _single_page(Path(path_b))
        if Path(path_a).samefile(path_b):  # both read: both exist
            raise WakelineError(f"{path_b}: the same file as frame A ({path_a}); a frame pair "
                                "is two exposures")
        name_a, name_b = str(path_a), str(path_b)
    if frame_a.shape != frame_b.shape:
        raise WakelineError(
            f"{name_b}: frame shape {frame_b.shape[1]}x{frame_b.shape[0]} differs from "
            f"{name_a} ({frame_a.shape[1]}x{frame_a.shape[0]})"
        )
    _check_alike(name_a, frame_a, name_b, frame_b)
    return _as_float(frame_a), _as_float(frame_b)


def frame_size(path: str | Path) -> tuple[int, int] | None:
    """``(H, W)`` of a frame file's first page from its header alone (no pixels decoded), or
    None where the header cannot be read (the file's own reading then says why)."""
    try:
        path = Path(path)
        if _kind_of(path, path.suffix.lower()) == "TIFF":
            import tifffile

            with tifffile.TiffFile(path) as tif:
                shape = tif.pages[0].shape
        else:
            import imageio.v3 as iio

            shape = iio.improps(path, extension=".png").shape
        return int(shape[0]), int(shape[1])
    except Exception:  # noqa: BLE001 - any header the decoder cannot read: no size known
        return None


#: Brightest counts (99.9th percentile) of frames A and B further apart than this factor mean
#: differently scaled exports (a 12-bit frame against one shifted to 16 bits is 16x); the two
#: laser pulses of one pair differ far less.
MAX_BRIGHTNESS_RATIO = 8.0


def _check_alike(name_a: str, frame_a: np.ndarray, name_b: str, frame_b: np.ndarray) -> None:
    """Refuse frames A and B stored differently: correlating a 16-bit frame with an 8-bit one
    (or a rescaled one) weighs their particles wrongly and moves the result."""
    if frame_a.dtype != frame_b.dtype:
        raise WakelineError(f"{name_b}: {_depth(frame_b)} frame but {name_a} is "
                            f"{_depth(frame_a)}; export both frames with the same bit depth")
    step = max(1, int(np.sqrt(frame_a.size / 1e5)))  # ~1e5 pixels say it well enough
    bright = [float(np.percentile(f[::step, ::step], 99.9)) for f in (frame_a, frame_b)]
    if min(bright) > 0 and max(bright) > MAX_BRIGHTNESS_RATIO * min(bright):
        raise WakelineError(f"{name_b}: brightness scale differs from {name_a} (brightest "
                            f"counts {bright[1]:g} against {bright[0]:g}); export both frames "
                            "with the same scaling")


def _depth(frame: np.ndarray) -> str:
    kind = "float" if frame.dtype.kind == "f" else ""
    return f"{frame.dtype.itemsize * 8}-bit" + (f" {kind}" if kind else "")


def read_frame(path: str | Path) -> np.ndarray:
    """One single-page frame (e.g. a background image) as float32 counts, ``(H, W)``.

    Raises
    ------
    core.WakelineError
        When the file is missing, unreadable, in colour, or holds more than one page.
    """
    return _as_float(_single_page(Path(path)))


def _as_float(frame: np.ndarray) -> np.ndarray:
    return frame.astype(np.float32, copy=False)


def _single_page(path: Path) -> np.ndarray:
    pages = _read_pages(path)
    if len(pages) > 1:
        raise WakelineError(
            f"{path}: holds {len(pages)} pages where one frame was expected "
            "(give a two-page TIFF alone as the pair)"
        )
    return pages[0]


def _read_pages(path: Path) -> list[np.ndarray]:
    if not path.exists():
        raise WakelineError(f"{path}: file not found")
    if path.is_dir():
        raise WakelineError(f"{path}: is a folder, not a frame file")
    if path.stat().st_size == 0:
        raise WakelineError(f"{path}: file is empty")
    suffix = path.suffix.lower()
    if suffix not in TIFF_SUFFIXES | PNG_SUFFIXES:
        raise WakelineError(f"{path}: unsupported image type '{suffix}' (use TIFF or PNG)")
    kind = _kind_of(path, suffix)
    try:
        raw = _read_tiff_pages(path) if kind == "TIFF" else [_read_png(path)]
    except WakelineError:
        raise
    except Exception as exc:  # noqa: BLE001 - any decoder failure is the file's fault, not ours
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise WakelineError(f"{path}: not a readable image ({reason})") from None
    return [_checked_frame(path, page) for page in raw]


#: The first bytes of each kind of image file (the TIFF and PNG specifications).
_SIGNATURES = {"TIFF": (b"II*\0", b"MM\0*", b"II+\0", b"MM\0+"), "PNG": (b"\x89PNG\r\n\x1a\n",)}


def _kind_of(path: Path, suffix: str) -> str:
    """"TIFF" or "PNG" by the file's first bytes (a TIFF named ``.png`` is read as the TIFF it
    is); a file that begins as neither is refused in the analyst's words rather than the
    decoder's (a text file named ``.png``)."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
    except OSError as exc:
        raise WakelineError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    for kind, starts in _SIGNATURES.items():
        if head.startswith(starts):
            return kind
    named = "TIFF" if suffix in TIFF_SUFFIXES else "PNG"
    raise WakelineError(f"{path}: not a {named} image (the file does not begin as one; "
                        "named for one by mistake?)")


def _read_tiff_pages(path: Path) -> list[np.ndarray]:
    import tifffile

    with tifffile.TiffFile(path) as tif:
        if len(tif.pages) == 0:
            raise WakelineError(f"{path}: TIFF has no pages")
        return [page.asarray() for page in tif.pages]


def _read_png(path: Path) -> np.ndarray:
    import imageio.v3 as iio

    # decoded as the PNG its first bytes say it is, whatever its name (_kind_of)
    return iio.imread(path, extension=".png")


def _checked_frame(path: Path, page: np.ndarray) -> np.ndarray:
    page = np.asarray(page)
    if page.ndim == 3 and page.shape[-1] in (3, 4) and _grey_in_colour(page):
        page = page[..., 0]  # grey levels stored as colour (a palette PNG, an RGB export)
    if page.ndim == 3 and page.shape[-1] in (3, 4):
        raise WakelineError(
            f"{path}: colour image ({page.shape[-1]} channels); export the camera's single-channel frames"
        )
    if page.ndim != 2:
        raise WakelineError(f"{path}: an image of {' x '.join(map(str, page.shape))} values, "
                            "not one greyscale frame (several planes in one page?); give a pair "
                            "as two files or a two-page TIFF")
    if page.dtype.kind not in "uif":  # 1-bit (bool), complex, ...: not a camera's grey levels
        what = "a 1-bit (black and white)" if page.dtype.kind == "b" else f"a {page.dtype}"
        raise WakelineError(f"{path}: {what} image; export the camera's greyscale frames "
                            "(8 to 16 bits, or floating point)")
    if page.size == 0 or min(page.shape) < 16:
        raise WakelineError(f"{path}: frame of {page.shape[1]}x{page.shape[0]} px is too small")
    if page.dtype.kind == "f" and not np.all(np.isfinite(page)):
        raise WakelineError(f"{path}: frame contains non-finite values (NaN or inf)")
    return page  # as stored: its bit depth is compared with the other frame's


def _grey_in_colour(page: np.ndarray) -> bool:
    """Three equal colour channels (and, with a fourth, no transparency): a grey frame."""
    red = page[..., 0]
    opaque = page.shape[-1] == 3 or (
        page.dtype.kind in "ui" and np.all(page[..., 3] == np.iinfo(page.dtype).max))
    return bool(opaque and np.array_equal(red, page[..., 1]) and np.array_equal(red, page[..., 2]))


def write_frame(path: str | Path, frame: np.ndarray, bits: int = 16) -> None:
    """Write one frame as an uncompressed single-page TIFF of the given bit depth (8 or 16)."""
    import tifffile

    dtype = np.uint8 if bits <= 8 else np.uint16
    top = np.iinfo(dtype).max
    tifffile.imwrite(path, np.clip(np.rint(frame), 0, top).astype(dtype))
