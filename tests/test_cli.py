"""The `wakeline` command contract (README): --help, exit codes 0/1/2, one-line errors."""

import csv
import json
import os
import subprocess
import sys
import tempfile

import numpy as np
import pytest
import tifffile


def wakeline(*args, cwd=None):
    env = {**os.environ, "WAKELINE_HOME": tempfile.mkdtemp(prefix="wakeline-home-")}
    return subprocess.run(
        [sys.executable, "-m", "app.cli", *map(str, args)],
        check=False, capture_output=True, text=True, cwd=cwd, env=env,
    )


def test_help_lists_commands():
    done = wakeline("--help")
    assert done.returncode == 0
    assert "pair" in done.stdout


def test_bad_usage_is_exit_2():
    done = wakeline("pair")
    assert done.returncode == 2
    done = wakeline("pair", "a.tif", "b.tif", "--dt", "soon")
    assert done.returncode == 2


@pytest.mark.parametrize("content", [b"", b"plain text, not a TIFF\n"], ids=["empty", "text"])
def test_bad_file_is_one_line_exit_1(tmp_path, content):
    good = tmp_path / "a.tif"
    tifffile.imwrite(good, np.zeros((64, 64), np.uint16))
    bad = tmp_path / "b.tif"
    bad.write_bytes(content)
    done = wakeline("pair", good, bad, "--no-ball")
    assert done.returncode == 1
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and str(bad) in lines[0] and "Traceback" not in done.stderr


def test_mismatched_shapes_exit_1(tmp_path):
    tifffile.imwrite(tmp_path / "a.tif", np.zeros((64, 64), np.uint16))
    tifffile.imwrite(tmp_path / "b.tif", np.zeros((64, 80), np.uint16))
    done = wakeline("pair", tmp_path / "a.tif", tmp_path / "b.tif", "--no-ball")
    assert done.returncode == 1 and "b.tif" in done.stderr and "differs" in done.stderr


def test_negative_dt_is_bad_usage(tmp_path):
    tifffile.imwrite(tmp_path / "a.tif", np.zeros((64, 64), np.uint16))
    done = wakeline("pair", tmp_path / "a.tif", tmp_path / "a.tif", "--no-ball", "--dt", "-1")
    assert done.returncode == 2
    assert done.stderr.strip().splitlines()[-1].endswith(
        "error: argument --dt: must be positive, got -1")


def test_pair_no_ball_writes_vectors_and_json(tmp_path):
    """A uniform shift of (3.3, -1.2) px is recovered by the command (closed form: uniform flow)."""
    from core.images import write_frame
    from core.synth import particle_pair, uniform

    a, b = particle_pair((256, 256), uniform(3.3, -1.2), seed=3)
    write_frame(tmp_path / "a.tif", a)
    write_frame(tmp_path / "b.tif", b)
    done = wakeline("pair", tmp_path / "a.tif", tmp_path / "b.tif", "--no-ball",
                    "--vectors", tmp_path / "v.csv", "--json", tmp_path / "r.json")
    assert done.returncode == 0, done.stderr
    with open(tmp_path / "v.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0]) == ["x_px", "y_px", "dx_px", "dy_px", "valid"]
    good = [r for r in rows if r["valid"] == "1"]
    assert len(good) >= 0.9 * len(rows)
    assert np.median([float(r["dx_px"]) for r in good]) == pytest.approx(3.3, abs=0.05)
    assert np.median([float(r["dy_px"]) for r in good]) == pytest.approx(-1.2, abs=0.05)
    record = json.loads((tmp_path / "r.json").read_text())
    assert record["separation"]["upper_deg"] is None and record["ball"] is None


def test_pair_conditioning_options(tmp_path):
    """A background image subtracted, glare mask and normalisation off: the same uniform shift
    (closed form: uniform flow); a background of another size is one line, exit 1."""
    from core.images import write_frame
    from core.synth import particle_pair, uniform

    a, b = particle_pair((128, 128), uniform(2.0, 1.0), seed=4)
    write_frame(tmp_path / "a.tif", a)
    write_frame(tmp_path / "b.tif", b)
    write_frame(tmp_path / "bg.tif", np.full((128, 128), 20.0))
    done = wakeline("pair", tmp_path / "a.tif", tmp_path / "b.tif", "--no-ball",
                    "--background", tmp_path / "bg.tif", "--no-glare-mask", "--normalise", "0",
                    "--air-temp", "5", "--json", tmp_path / "r.json")
    assert done.returncode == 0, done.stderr
    record = json.loads((tmp_path / "r.json").read_text())
    assert record["settings"]["mask_glare"] is False
    assert record["settings"]["normalise_spacings"] is None
    assert record["settings"]["air_temp_c"] == 5.0
    write_frame(tmp_path / "small.tif", np.zeros((64, 64)))
    done = wakeline("pair", tmp_path / "a.tif", tmp_path / "b.tif", "--no-ball",
                    "--background", tmp_path / "small.tif")
    assert done.returncode == 1 and "small.tif" in done.stderr and "background" in done.stderr
    # frame A given as the background would take the particle images away with it
    done = wakeline("pair", tmp_path / "a.tif", tmp_path / "b.tif", "--no-ball",
                    "--background", tmp_path / "a.tif")
    assert done.returncode == 1 and done.stderr.startswith(
        f"wakeline: {tmp_path / 'a.tif'}: not a background image: its particle images are those "
        "of frame A")
    assert len(done.stderr.splitlines()) == 1


def test_window_without_display_is_one_line_exit_1():
    env = {k: v for k, v in os.environ.items() if k not in ("DISPLAY", "WAYLAND_DISPLAY")}
    env.update(QT_QPA_PLATFORM="offscreen", WAKELINE_HOME=tempfile.mkdtemp())
    done = subprocess.run([sys.executable, "-m", "app.cli"], check=False, capture_output=True,
                          text=True, env=env, timeout=60)
    assert done.returncode == 1
    assert "no display" in done.stderr and "Traceback" not in done.stderr
    assert "(QT_QPA_PLATFORM is offscreen, which draws nothing on a screen)" in done.stderr


def test_pair_names_the_file_where_no_ball_was_found(tmp_path, capsys):
    from app.cli import main
    from core.images import write_frame
    from core.synth import particle_pair, uniform

    a, b = particle_pair((128, 160), uniform(2.0, 1.0), seed=4)  # air only
    write_frame(tmp_path / "a.tif", a)
    write_frame(tmp_path / "b.tif", b)
    assert main(["pair", str(tmp_path / "a.tif"), str(tmp_path / "b.tif"), "--dt", "1e-4"]) == 1
    err = capsys.readouterr().err.strip()
    assert err.startswith(f"wakeline: frame A ({tmp_path / 'a.tif'}): no ball found")
    assert "\n" not in err


def test_pair_words_the_swapped_frames_advice_for_its_two_files():
    # the measurement's advice is a session's (frames_swapped in shots.csv, import again);
    # `pair` reads no manifest: there the files go the other way round
    from app.cli.pair import pair_wording
    from core.shot import SWAPPED_CHECK, SWAPPED_REMEDY

    text = pair_wording(f"frames look swapped: ...; if the camera wrote them so, "
                        f"{SWAPPED_REMEDY} (...)")
    assert "give the two frames the other way round" in text
    assert "shots.csv" not in text and "--correct-values" not in text
    text = pair_wording(f"... looks the wrong way round: ...; check the flight direction, or "
                        f"{SWAPPED_CHECK} (...)")
    assert "the order of the two frames given" in text and "shots.csv" not in text
