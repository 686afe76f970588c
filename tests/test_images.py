"""Frame-pair reading: good files load, bad files give one-line errors naming the file."""

import numpy as np
import pytest
import tifffile
from skimage import io as skio

from core import WakelineError
from core.images import read_frame_pair, write_frame


def _frame(seed=0, shape=(64, 80)):
    return np.random.default_rng(seed).integers(0, 4000, shape).astype(np.uint16)


def test_two_single_page_tiffs(tmp_path):
    a, b = _frame(0), _frame(1)
    tifffile.imwrite(tmp_path / "a.tif", a)
    tifffile.imwrite(tmp_path / "b.tif", b)
    fa, fb = read_frame_pair(tmp_path / "a.tif", tmp_path / "b.tif")
    assert fa.dtype == np.float32 and fa.shape == (64, 80)
    np.testing.assert_array_equal(fa, a)
    np.testing.assert_array_equal(fb, b)


def test_two_page_tiff(tmp_path):
    a, b = _frame(0), _frame(1)
    tifffile.imwrite(tmp_path / "pair.tif", np.stack([a, b]))
    fa, fb = read_frame_pair(tmp_path / "pair.tif")
    np.testing.assert_array_equal(fa, a)
    np.testing.assert_array_equal(fb, b)


def test_png_8bit(tmp_path):
    a = (_frame(0) // 16).astype(np.uint8)
    skio.imsave(tmp_path / "a.png", a, check_contrast=False)
    skio.imsave(tmp_path / "b.png", a, check_contrast=False)
    fa, _ = read_frame_pair(tmp_path / "a.png", tmp_path / "b.png")
    np.testing.assert_array_equal(fa, a)


def test_write_frame_roundtrip(tmp_path):
    frame = np.linspace(0, 5000, 64 * 80).reshape(64, 80)
    write_frame(tmp_path / "f.tif", frame, bits=16)
    np.testing.assert_array_equal(tifffile.imread(tmp_path / "f.tif"), np.rint(frame))


@pytest.mark.parametrize(
    "make, expected",
    [
        (lambda p: p.write_bytes(b""), "empty"),
        (lambda p: p.write_text("this is not an image\n"), "not a TIFF image"),
        (lambda p: p.write_bytes(_truncated_tiff()), "not a readable image"),
        (lambda p: p.write_bytes(b"II*\0" + bytes(8)), "TIFF has no pages"),
    ],
    ids=["empty", "text-renamed", "truncated", "header-only"],
)
def test_bad_file_messages(tmp_path, make, expected):
    good = tmp_path / "good.tif"
    tifffile.imwrite(good, _frame())
    bad = tmp_path / "bad.tif"
    make(bad)
    with pytest.raises(WakelineError) as err:
        read_frame_pair(good, bad)
    message = str(err.value)
    assert str(bad) in message and expected in message and "\n" not in message
    # the decoder's own words (a byte string, a backend's name) stay out of it
    assert "b'" not in message and "backend" not in message


def test_a_text_file_named_png_is_told_in_plain_words(tmp_path):
    bad = tmp_path / "notes.png"
    bad.write_text("hello\n")
    with pytest.raises(WakelineError, match=r"notes.png: not a PNG image \(the file does not "
                       "begin as one"):
        read_frame_pair(bad, bad)


def _truncated_tiff() -> bytes:
    import io

    buf = io.BytesIO()
    tifffile.imwrite(buf, _frame(shape=(256, 256)))
    return buf.getvalue()[:5000]


def test_mismatched_shapes(tmp_path):
    tifffile.imwrite(tmp_path / "a.tif", _frame(shape=(64, 80)))
    tifffile.imwrite(tmp_path / "b.tif", _frame(shape=(64, 96)))
    with pytest.raises(WakelineError, match="b.tif: frame shape 96x64 differs"):
        read_frame_pair(tmp_path / "a.tif", tmp_path / "b.tif")
    with tifffile.TiffWriter(tmp_path / "pair.tif") as tif:  # the pages of one file, named
        tif.write(_frame(shape=(64, 80)))
        tif.write(_frame(shape=(64, 96)))
    with pytest.raises(WakelineError, match=r"pair.tif page 2: frame shape 96x64 differs from "
                                            r".*pair.tif page 1 \(80x64\)"):
        read_frame_pair(tmp_path / "pair.tif")


def test_single_page_where_two_needed(tmp_path):
    tifffile.imwrite(tmp_path / "one.tif", _frame())
    with pytest.raises(WakelineError, match="one.tif: has 1 page"):
        read_frame_pair(tmp_path / "one.tif")


def test_colour_refused(tmp_path):
    rgb = np.zeros((64, 80, 3), np.uint8)
    rgb[..., 0] = 200  # red: not a grey level
    skio.imsave(tmp_path / "c.png", rgb, check_contrast=False)
    skio.imsave(tmp_path / "d.png", rgb, check_contrast=False)
    with pytest.raises(WakelineError, match="colour image"):
        read_frame_pair(tmp_path / "c.png", tmp_path / "d.png")


def test_several_planes_in_one_page_are_named_in_plain_words(tmp_path):
    # a stack of frames saved as one multi-sample page (tifffile's planar storage)
    tifffile.imwrite(tmp_path / "stack.tif", np.stack([_frame()] * 3),
                     photometric="minisblack", planarconfig="separate")
    with pytest.raises(WakelineError, match=r"stack.tif: an image of 3 x \d+ x \d+ values, not "
                                            r"one greyscale frame"):
        read_frame_pair(tmp_path / "stack.tif")


def test_one_file_given_as_both_frames_is_refused(tmp_path):
    # a slip of the shell's history or completion: the pair would show no motion at all
    tifffile.imwrite(tmp_path / "a.tif", _frame())
    with pytest.raises(WakelineError, match=r"a.tif: the same file as frame A \(.*a.tif\); a "
                                            r"frame pair is two exposures$"):
        read_frame_pair(tmp_path / "a.tif", tmp_path / "." / "a.tif")


def test_grey_levels_stored_as_colour_are_read_as_the_grey_frame(tmp_path):
    # a palette PNG or an RGB export of a camera frame was once refused as a colour image
    from PIL import Image

    grey = (_frame() // 16).astype(np.uint8)
    Image.fromarray(grey).convert("P").save(tmp_path / "p.png")
    skio.imsave(tmp_path / "rgb.png", np.stack([grey] * 3, axis=-1), check_contrast=False)
    frame_a, frame_b = read_frame_pair(tmp_path / "p.png", tmp_path / "rgb.png")
    assert np.array_equal(frame_a, grey) and np.array_equal(frame_b, grey)


@pytest.mark.parametrize(("stored", "named"), [(np.bool_, "1-bit"), (np.complex64, "complex64")])
def test_frames_that_are_not_grey_levels_are_refused_by_name(tmp_path, stored, named):
    # they once stopped a whole import with an internal error naming no file
    tifffile.imwrite(tmp_path / "x.tif", (_frame() > 100).astype(stored))
    with pytest.raises(WakelineError, match=f"x.tif: a {named}.*greyscale"):
        read_frame_pair(tmp_path / "x.tif", tmp_path / "x.tif")


def test_non_finite_refused(tmp_path):
    f = np.ones((64, 80), np.float32)
    f[3, 4] = np.nan
    tifffile.imwrite(tmp_path / "n.tif", f)
    with pytest.raises(WakelineError, match="non-finite"):
        read_frame_pair(tmp_path / "n.tif", tmp_path / "n.tif")


def test_missing_file(tmp_path):
    with pytest.raises(WakelineError, match="missing.tif: file not found"):
        read_frame_pair(tmp_path / "missing.tif", tmp_path / "missing.tif")


def test_two_page_tiff_where_one_frame_is_expected(tmp_path):
    tifffile.imwrite(tmp_path / "pair.tif", np.stack([_frame(0), _frame(1)]))
    tifffile.imwrite(tmp_path / "b.tif", _frame(2))
    with pytest.raises(WakelineError, match="pair.tif: holds 2 pages"):
        read_frame_pair(tmp_path / "pair.tif", tmp_path / "b.tif")


def test_a_tiff_named_png_is_read_as_the_tiff_it_is(tmp_path):
    # the decoder once sniffed the content; the file's kind is told by its first bytes
    tifffile.imwrite(tmp_path / "a.png", _frame())
    tifffile.imwrite(tmp_path / "b.tif", _frame())
    frame_a, frame_b = read_frame_pair(tmp_path / "a.png", tmp_path / "b.tif")
    np.testing.assert_array_equal(frame_a, frame_b)


def test_a_folder_given_as_a_frame_is_named_as_such(tmp_path):
    write_frame(tmp_path / "a.tif", np.ones((32, 32)))
    (tmp_path / "frames").mkdir()
    with pytest.raises(WakelineError, match=r"frames: is a folder, not a frame file$"):
        read_frame_pair(tmp_path / "frames", tmp_path / "a.tif")


def test_a_frames_size_is_read_from_its_header(tmp_path):
    # the background's frame sizes are told without decoding every shot's pixels
    import imageio.v3 as iio

    from core.images import frame_size

    tifffile.imwrite(tmp_path / "a.tif", np.zeros((30, 40), np.uint16))
    tifffile.imwrite(tmp_path / "pair.tif", np.zeros((2, 30, 40), np.uint16))
    iio.imwrite(tmp_path / "a.png", np.zeros((20, 50), np.uint8))
    (tmp_path / "bad.tif").write_bytes(b"not a picture")
    assert frame_size(tmp_path / "a.tif") == (30, 40)
    assert frame_size(tmp_path / "pair.tif") == (30, 40)
    assert frame_size(tmp_path / "a.png") == (20, 50)
    assert frame_size(tmp_path / "bad.tif") is None
    assert frame_size(tmp_path / "gone.tif") is None
