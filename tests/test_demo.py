"""The bundled demo: its files regenerate exactly, and `wakeline demo` runs end to end."""

from __future__ import annotations

import csv
import importlib.util
import math
import os
import sys
import types
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np
import pytest

SAMPLE_RUNS = Path(__file__).resolve().parent.parent / "sample_runs"


def _make_demo_module():
    name = "wakeline_sample_runs_make_demo"
    if name not in sys.modules:
        spec = importlib.util.spec_from_file_location(name, SAMPLE_RUNS / "make_demo.py")
        module = importlib.util.module_from_spec(spec)
        sys.modules[name] = module  # dataclasses look their module up while the file runs
        spec.loader.exec_module(module)
    return sys.modules[name]


def _rows(path: Path) -> dict[str, list[str]]:
    with open(path, encoding="utf-8", newline="") as fh:
        rows = list(csv.reader(fh))
    return {"header": rows[0], **{row[0]: row for row in rows[1:]}}


def test_shipped_demo_is_small_and_complete():
    manifest = _rows(SAMPLE_RUNS / "shots.csv")
    shots = [k for k in manifest if k != "header"]
    assert 8 <= len(shots) <= 16
    for column in ("shot", "dt_s", "scale_mm_per_px", "ball_diameter_mm", "ball_type",
                   "speed_nominal_m_s", "spin_rpm", "seam_deg", "notes"):
        assert column in manifest["header"]
    for shot_id in shots:
        assert (SAMPLE_RUNS / f"{shot_id}_a.tif").is_file()
        assert (SAMPLE_RUNS / f"{shot_id}_b.tif").is_file()
    total = sum(p.stat().st_size for p in SAMPLE_RUNS.iterdir() if p.is_file())
    assert total < 15e6


def test_demo_files_regenerate_byte_for_byte(tmp_path):
    make_demo = _make_demo_module()
    chosen = ["sw03", "sw12"]  # a well-seeded shot and the sparse one
    make_demo.write_demo(tmp_path, chosen)
    for shot_id in chosen:
        for ab in ("a", "b"):
            name = f"{shot_id}_{ab}.tif"
            assert (tmp_path / name).read_bytes() == (SAMPLE_RUNS / name).read_bytes(), name
    for name in ("shots.csv", "truth.csv", "reviews.csv"):
        fresh, shipped = _rows(tmp_path / name), _rows(SAMPLE_RUNS / name)
        assert fresh["header"] == shipped["header"]
        for shot_id in chosen:
            assert fresh.get(shot_id) == shipped.get(shot_id), (name, shot_id)


def test_demo_truth_follows_the_seam_model():
    """Seam side separates later than the laminar side around 20-30 deg of seam angle
    (Mehta 1985, Annu. Rev. Fluid Mech. 17:151, memory); the laminar side sits near -9 deg,
    i.e. 81 deg from the front stagnation point (Achenbach 1972, J. Fluid Mech. 54:565, memory)."""
    truth = _rows(SAMPLE_RUNS / "truth.csv")
    manifest = _rows(SAMPLE_RUNS / "shots.csv")
    seam_col = manifest["header"].index("seam_deg")
    head = truth["header"]
    up_col, low_col = head.index("upper_true_deg"), head.index("lower_true_deg")
    by_seam: dict[float, list[float]] = {}
    uppers = []
    for shot_id, row in truth.items():
        if shot_id == "header":
            continue
        seam = float(manifest[shot_id][seam_col])
        by_seam.setdefault(seam, []).append(float(row[low_col]) - float(row[up_col]))
        uppers.append(float(row[up_col]))
    assert abs(np.mean(uppers) + 9.0) < 1.5
    gap = {seam: np.mean(v) for seam, v in by_seam.items()}
    assert min(gap[20.0], gap[30.0]) > 15.0
    assert gap[0.0] < 5.0 and gap[50.0] < 10.0


def _check_replayed(row: dict, review: dict) -> None:
    """Accepted: both proposals within the tolerance of the analyst's marks. Adjusted: the
    sides that were off sit exactly on the marks, the others on their proposals."""
    from app.cli.demo import ACCEPT_TOLERANCE_DEG

    assert row["review_status"] in ("accepted", "adjusted")
    for side in ("upper", "lower"):
        final, mark = float(row[f"{side}_final_deg"]), float(review[f"{side}_deg"])
        proposed = row[f"{side}_proposed_deg"]
        near = proposed != "" and abs(float(proposed) - mark) <= ACCEPT_TOLERANCE_DEG
        if row["review_status"] == "accepted":
            assert near and final == pytest.approx(float(proposed))
        else:
            assert final == pytest.approx(float(proposed) if near else mark)


def test_replay_accepts_close_proposals_and_moves_the_others():
    from app.cli.demo import _moved_sides
    from core.store import ShotRecord
    from core.summary import ShotSummary

    record = ShotRecord("x", {}, state="processed", summary=ShotSummary.from_dict(
        {"separation": {"upper_deg": -8.2, "lower_deg": 20.0}}))
    assert _moved_sides(record, {"upper_deg": "-9.5", "lower_deg": "19"}) == {}
    assert _moved_sides(record, {"upper_deg": "-9.5", "lower_deg": "14"}) == {"lower_deg": 14.0}
    record.summary = ShotSummary.from_dict({"separation": {"lower_deg": 20.0}})
    assert _moved_sides(record, {"upper_deg": "-9.5", "lower_deg": "21.5"}) == {
        "upper_deg": -9.5}


@pytest.fixture
def demo_out(tmp_path):
    return tmp_path / "demo"


DEMO_SUBSET = ("sw03", "sw11", "sw12")  # reviewed, left to review, unusable


@pytest.fixture
def small_sample_runs(tmp_path, monkeypatch):
    """The shipped demo cut down to three shots (processing all of them takes a while)."""
    import shutil

    from app.cli import demo

    folder = tmp_path / "sample_runs"
    folder.mkdir()
    for name in ("shots.csv", "reviews.csv", "truth.csv"):
        lines = (SAMPLE_RUNS / name).read_text(encoding="utf-8").splitlines(keepends=True)
        kept = [lines[0]] + [line for line in lines[1:] if line.split(",")[0] in DEMO_SUBSET]
        (folder / name).write_text("".join(kept), encoding="utf-8")
    for shot_id in DEMO_SUBSET:
        for ab in ("a", "b"):
            shutil.copyfile(SAMPLE_RUNS / f"{shot_id}_{ab}.tif", folder / f"{shot_id}_{ab}.tif")
    monkeypatch.setattr(demo, "SAMPLE_RUNS", folder)
    return folder


def test_demo_command_without_window(demo_out, small_sample_runs, capsys):
    from pypdf import PdfReader

    from app.cli import main
    from core.store import Session

    assert main(["demo", "--out", str(demo_out), "--no-window", "--workers", "0"]) == 0
    out = capsys.readouterr().out
    sheet, table = demo_out / "demo_sheet.pdf", demo_out / "demo_table.csv"
    assert f"shot sheet: {sheet}" in out and f"table:      {table}" in out
    shots = list(DEMO_SUBSET)
    # cover, the conditions page, two shots a page
    assert len(PdfReader(str(sheet)).pages) == 1 + 1 + math.ceil(len(shots) / 2)
    with open(table, encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["shot"] for r in rows] == shots
    by_shot = {r["shot"]: r for r in rows}
    with open(SAMPLE_RUNS / "reviews.csv", encoding="utf-8", newline="") as fh:
        reviews = {r["shot"]: r for r in csv.DictReader(fh)}
    for shot_id, row in by_shot.items():
        review = reviews.get(shot_id)
        if review is None or row["state"] != "processed":
            assert row["review_status"] == "to review"
        elif review["unusable_reason"]:
            assert row["review_status"] == "unusable"
            assert row["unusable_reason"] == review["unusable_reason"]
        else:
            _check_replayed(row, review)
    assert [by_shot[s]["review_status"] != "to review" for s in shots] == [True, False, True]

    # a second run reuses the session and never overwrites the analyst's own edits
    with Session.open(demo_out / "demo_session.h5") as session:
        session.set_pick("sw03", status="unusable", reason="checked by hand", who="me")
    assert main(["demo", "--out", str(demo_out), "--no-window", "--workers", "0"]) == 0
    assert "using the existing demo session" in capsys.readouterr().out
    with Session.open(demo_out / "demo_session.h5", writable=False) as session:
        assert session["sw03"].pick.status == "unusable"
    # the bundled folder is never written to
    assert sorted(p.name for p in small_sample_runs.iterdir()) == sorted(
        ["shots.csv", "reviews.csv", "truth.csv"]
        + [f"{s}_{ab}.tif" for s in DEMO_SUBSET for ab in "ab"])


def test_demo_opens_the_window_when_there_is_a_display(demo_out, small_sample_runs, monkeypatch):
    from app.cli import demo, display, main

    opened = []
    monkeypatch.setattr(display, "has_display", lambda: True)
    monkeypatch.setattr(demo, "process_demo", lambda path, workers=None: None)
    monkeypatch.setitem(sys.modules, "app.qt.window",
                        types.SimpleNamespace(run_window=lambda path: opened.append(path) or 0))
    assert main(["demo", "--out", str(demo_out)]) == 0
    assert opened == [demo_out / "demo_session.h5"]
    assert not (demo_out / "demo_sheet.pdf").exists()


def test_demo_refuses_to_write_into_the_shipped_folder(capsys):
    from app.cli import main

    assert main(["demo", "--out", str(SAMPLE_RUNS), "--no-window"]) == 1
    err = capsys.readouterr().err.strip()
    assert "kept as shipped" in err and "\n" not in err


def test_has_display_rules(monkeypatch):
    from app.cli.display import has_display

    monkeypatch.setenv("QT_QPA_PLATFORM", "offscreen")
    assert not has_display()
    monkeypatch.setenv("QT_QPA_PLATFORM", "xcb")
    assert has_display()
    monkeypatch.delenv("QT_QPA_PLATFORM")
    monkeypatch.setattr(sys, "platform", "linux")
    monkeypatch.delenv("DISPLAY", raising=False)
    monkeypatch.delenv("WAYLAND_DISPLAY", raising=False)
    assert not has_display()
    monkeypatch.setenv("WAYLAND_DISPLAY", "wayland-0")
    assert has_display()


def test_fresh_demo_starts_again_but_not_under_an_open_window(demo_out, capsys):
    from app.cli import main
    from app.cli.demo import prepare_demo
    from core.store import Session

    path = prepare_demo(demo_out)
    with Session.open(path) as session:
        session.set_pick("sw02", status="unusable", reason="edited", who="me")
        assert main(["demo", "--out", str(demo_out), "--fresh", "--no-window"]) == 1
        assert "open for writing" in capsys.readouterr().err
    assert prepare_demo(demo_out, fresh=True) == path
    with Session.open(path, writable=False) as session:
        assert session["sw02"].pick.status == "to review"
        assert session.history("sw02") == []
