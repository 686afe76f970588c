"""The PDF shot sheet: pages, text against the CSV table, a rendered page, selection, command."""

from __future__ import annotations

import csv
import math
import os
import re
import shutil
import subprocess

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np
import pytest

PICKS = {
    "s01": {"status": "accepted"},
    "s02": {"status": "adjusted", "upper_deg": 17.25, "note": "moved to the shear-layer root"},
    "s03": {"status": "unusable", "reason": "ball cut by the frame edge"},
    "s05": {"status": "adjusted", "lower_deg": -3.75},
}


@pytest.fixture
def reviewed_session(make_session):
    """Five processed shots (analytic results with proposals) and the picks above."""
    from core.store import Session

    path = make_session(5, name="sheet demo")
    with Session.open(path) as session:
        for shot_id, pick in PICKS.items():
            session.set_pick(shot_id, who="tester", **pick)
    return path


def _pdf_text(path) -> tuple[int, str]:
    from pypdf import PdfReader

    reader = PdfReader(str(path))
    text = " ".join(page.extract_text() for page in reader.pages)
    return len(reader.pages), re.sub(r"\s+", " ", text)  # words come apart as tabs/newlines


def _table(session_path, out_csv) -> list[dict]:
    from core.store import Session, write_table_csv

    with Session.open(session_path, writable=False) as session:
        write_table_csv(session, out_csv)
    with open(out_csv, encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


def test_sheet_pages_text_match_table(reviewed_session, tmp_path):
    from app.sheet import make_sheet
    from app.sheet.content import sheet_angle
    from core.store import Session

    out = tmp_path / "sheet.pdf"
    with Session.open(reviewed_session, writable=False) as session:
        report = make_sheet(session, out, per_page=2)
    n_pages, text = _pdf_text(out)
    assert n_pages == report.pages == 1 + 1 + math.ceil(5 / 2)  # cover, conditions, shots
    rows = _table(reviewed_session, tmp_path / "table.csv")
    finals = 0
    for row in rows:
        assert f"Shot {row['shot']}" in text
        for side in ("upper", "lower"):
            cell = row[f"{side}_final_deg"]
            if cell:
                finals += 1
                assert sheet_angle(float(cell)) in text, (row["shot"], side, cell)
    assert finals == 6  # s01 both (accepted), s02 both, s05 both (adjusted one side each)
    assert "+17.25°" in text  # the analyst's value to 0.01 deg, not the proposal
    assert "ADJUSTED" in text and "ball cut by the frame edge" in text
    # the unusable shot s03: no wake on the sheet, none in the table
    assert [r["wake_deflection_deg"] for r in rows if r["shot"] == "s03"] == [""]
    s03 = text[text.index("Shot s03"):text.index("Shot s04")]
    assert "wake —" in s03 and "deflected" not in s03
    assert "moved to the shear-layer root" in text
    assert "page 1 of 5" in text and "page 5 of 5" in text
    # cover: counts by status, and the statistics per condition on the next page only (one
    # form of them in one handover)
    assert "Each condition's mean angles with their 95 % intervals: the next page" in text
    assert "Final angles by" not in text
    # the conditions page: grouped by the seam angle, one row per seam angle
    assert "Separation by condition" in text and "Shots grouped by seam_deg" in text
    # each printed row gives under its values what the interval leaves out: here (one shot
    # per seam angle) that the value is one shot's, and how many were decided
    from app.sheet.document import sheet_conditions

    with Session.open(reviewed_session, writable=False) as session:
        _by, conditions = sheet_conditions(session, list(session.values()))
    assert all(len(c.usable_ids) <= 1 for c in conditions)
    ones = sum(c.sides[side].n == 1 for c in conditions for side in ("upper", "lower"))
    assert ones >= 3 and text.count("one shot") >= ones + 1  # the page's note says it once
    assert all(f"{len(c.decided_ids)} decided" in text for c in conditions)


def test_sheet_page_renders_with_content(reviewed_session, tmp_path):
    from app.sheet import make_sheet
    from core.store import Session

    if shutil.which("pdftoppm") is None:
        pytest.fail("pdftoppm (poppler-utils) is needed; scripts/setup.sh installs it")
    out = tmp_path / "sheet.pdf"
    with Session.open(reviewed_session, writable=False) as session:
        make_sheet(session, out, per_page=1, shot_ids=["s02"])
    subprocess.run(["pdftoppm", "-r", "40", "-png", "-f", "3", "-l", "3", str(out),
                    str(tmp_path / "page")], check=True)
    from skimage import io

    page = io.imread(next(tmp_path.glob("page*.png")))[..., :3].astype(float)
    ink = np.any(page < 200, axis=-1).mean()
    colourful = (page.max(axis=-1) - page.min(axis=-1) > 60).mean()
    assert ink > 0.05, "the shot page is nearly blank"
    assert colourful > 0.01, "no vorticity colours on the shot page"


def test_sheet_selection_and_layout(reviewed_session, tmp_path):
    from app.sheet import make_sheet
    from core import WakelineError
    from core.store import Session

    with Session.open(reviewed_session, writable=False) as session:
        report = make_sheet(session, tmp_path / "a.pdf", statuses=("accepted", "adjusted"),
                            per_page=4)
        assert report.shot_ids == ["s01", "s02", "s05"]
        assert report.pages == 1 + 1 + 1
        report = make_sheet(session, tmp_path / "b.pdf", shot_ids=["s04", "s01"], per_page=3)
        assert report.shot_ids == ["s01", "s04"]
        _, text = _pdf_text(tmp_path / "b.pdf")
        assert "Shot s01" in text and "Shot s04" in text and "Shot s02" not in text
        # the cover's counts are the session's, and say so on a sheet of some of its shots
        assert f"The whole session ({len(session)} shots):" in text
        make_sheet(session, tmp_path / "all.pdf", per_page=4)
        assert "The whole session" not in _pdf_text(tmp_path / "all.pdf")[1]
        with pytest.raises(WakelineError, match="no shot 'nope'"):
            make_sheet(session, tmp_path / "c.pdf", shot_ids=["nope"])
        with pytest.raises(WakelineError, match="nothing to print"):
            make_sheet(session, tmp_path / "c.pdf", shot_ids=["s03"], statuses=("accepted",))
        with pytest.raises(WakelineError, match="not a numeric column"):
            make_sheet(session, tmp_path / "c.pdf", column="notes")
        # the window's name of the pseudo-column (its filter's speed_m_s) is taken too
        make_sheet(session, tmp_path / "d.pdf", shot_ids=["s01"], column="shot_order")
        assert "shot order" in _pdf_text(tmp_path / "d.pdf")[1]  # the overview's axis
    assert not (tmp_path / "c.pdf").exists()


def test_a_printed_condition_row_gives_the_shots_sd_under_its_values():
    """The small print under a printed condition's values: the sample standard deviation
    (ddof 1: sqrt(((-1)^2 + 1^2 + 0) / 2) = 1 for -9, -7, -8), and "one shot" alone."""
    from app.review.conditions import condition_cell_notes
    from core.conditions import group_conditions
    from core.store.records import Pick, ShotRecord, ShotSummary

    def rec(shot_id, seam, up, low, status="accepted"):
        summary = ShotSummary.from_dict({"separation": {"upper_deg": up, "lower_deg": low}})
        return ShotRecord(shot_id, {"seam_deg": seam}, state="processed", summary=summary,
                          pick=Pick(status=status))

    records = [rec("a", 10, -9.0, 4.0), rec("b", 10, -7.0, 8.0, "to review"),
               rec("c", 10, -8.0, 6.0), rec("d", 20, -9.0, None)]
    three, one = group_conditions(records, ["seam_deg"])
    notes = condition_cell_notes(three)
    assert notes[:4] == ["", "2 decided", "sd 1.0°", "sd 2.0°"]
    assert notes[4] == "sd 1.0°"  # upper - lower: -13, -15, -14
    assert condition_cell_notes(one)[1:4] == ["1 decided", "one shot", ""]


def test_the_conditions_page_gives_upper_minus_lower_as_the_rest_of_the_sheet(reviewed_session,
                                                                             tmp_path):
    """The difference column is upper − lower (as the window and the table), with the values of
    that sign."""
    from pypdf import PdfReader

    from app.review.text import angle_text
    from app.sheet import make_sheet
    from core.store import Session

    out = tmp_path / "sheet.pdf"
    with Session.open(reviewed_session, writable=False) as session:
        make_sheet(session, out, per_page=2)
    conditions = re.sub(r"\s+", " ", PdfReader(str(out)).pages[1].extract_text())
    assert "upper − lower" in conditions and "lower - upper" not in conditions
    rows = {r["shot"]: r for r in _table(reviewed_session, tmp_path / "table.csv")}
    s01 = rows["s01"]  # alone at its seam angle: the condition's difference is its own
    difference = float(s01["upper_final_deg"]) - float(s01["lower_final_deg"])
    assert abs(difference) > 0.1
    assert angle_text(difference) in conditions and angle_text(-difference) not in conditions


def test_the_conditions_page_is_the_sessions_whichever_shots_are_printed(reviewed_session,
                                                                           tmp_path):
    """A sheet of chosen shots still summarises each condition over all its shots (as
    ``wakeline conditions`` and ``table --by`` do), and says so: a summary of the chosen few
    (say the adjusted ones) would read as the condition's."""
    from pypdf import PdfReader

    from app.sheet import make_sheet
    from core.store import Session

    pages = {}
    with Session.open(reviewed_session, writable=False) as session:
        count = len(session)
        for name, shots in (("all", None), ("one", ["s01"])):
            make_sheet(session, tmp_path / f"{name}.pdf", shot_ids=shots, per_page=2)
            text = PdfReader(str(tmp_path / f"{name}.pdf")).pages[1].extract_text()
            # the page from its title on (the header counts the sheet's pages)
            pages[name] = re.sub(r"\s+", " ", text).split("Separation by condition", 1)[1]
    said = f" (all {count} of the session's shots, not only the 1 this sheet prints)"
    assert said not in pages["all"] and said in pages["one"]
    # the plot and the table alike (after the note, whose lines break otherwise)
    plots = [pages[name].split("seam_deg separation angle", 1)[1] for name in ("one", "all")]
    assert plots[0] == plots[1] and "-10 1 of 1" in plots[0]


def test_parse_statuses():
    from app.sheet import parse_statuses
    from core import WakelineError

    assert parse_statuses("accepted, adjusted") == ("accepted", "adjusted")
    assert parse_statuses("") is None
    with pytest.raises(WakelineError, match="unknown review status 'done'"):
        parse_statuses("accepted,done")
    # as the shot list's filter offers it: decisions a new measurement sent back
    assert parse_statuses("back to review") == ("back to review",)


def test_the_sheet_can_hold_the_decisions_sent_back_to_review_alone():
    from dataclasses import replace

    from app.sheet.content import parse_statuses, select_records
    from core.store import Pick, ShotRecord
    from core.store.records import MEASUREMENT_AUTHOR
    from core.summary import ShotSummary

    summary = ShotSummary.from_dict({})
    sent_back = ShotRecord("a", {}, state="processed", summary=summary,
                           pick=Pick(who=MEASUREMENT_AUTHOR, when="2026-12-05T10:00:00Z"))
    never = replace(sent_back, shot_id="b", pick=Pick())

    class Shots:  # what select_records reads of a session
        def values(self):
            return [sent_back, never]

    assert [r.shot_id for r in select_records(Shots(), None, parse_statuses(
        "back to review"))] == ["a"]
    assert [r.shot_id for r in select_records(Shots(), None, parse_statuses(
        "to review"))] == ["a", "b"]


def test_sheet_command(reviewed_session, tmp_path, capsys):
    from app.cli import main

    out = tmp_path / "cli.pdf"
    assert main(["sheet", reviewed_session, "-o", str(out), "--status", "accepted,adjusted",
                 "--per-page", "1", "--column", "seam_deg"]) == 0
    assert out.stat().st_size > 0
    assert f"{out}: 5 page(s), 3 shot(s)" in capsys.readouterr().out  # with the conditions
    with pytest.raises(SystemExit) as exc:
        main(["sheet", reviewed_session, "-o", str(out), "--status", "finished"])
    assert exc.value.code == 2
    err = capsys.readouterr().err.strip().splitlines()[-1]
    assert err.startswith("wakeline sheet: error: argument --status: unknown review status")
    with pytest.raises(SystemExit) as exc:
        main(["sheet", reviewed_session, "-o", str(out), "--per-page", "5"])
    assert exc.value.code == 2


def test_vorticity_colours_are_symmetric_about_zero():
    from app.review import colours

    w = np.array([[-2.0, -1.0, 0.0], [1.0, 2.0, np.nan]])
    rgba = colours.vorticity_rgb(w, limit_1_s=1.0)
    assert tuple(rgba[0, 2, :3]) == colours.hex_to_rgb(colours.VORTICITY_STOPS[3][1])  # zero
    assert tuple(rgba[1, 0, :3]) == colours.hex_to_rgb(colours.VORTICITY_STOPS[-1][1])
    assert tuple(rgba[0, 1, :3]) == colours.hex_to_rgb(colours.VORTICITY_STOPS[0][1])
    np.testing.assert_array_equal(rgba[0, 0], rgba[0, 1])  # beyond the limit: clipped
    np.testing.assert_array_equal(rgba[1, 1], rgba[1, 0])
    assert rgba[1, 2, 3] == 0 and rgba[0, 0, 3] == 255  # NaN is transparent
    assert colours.symmetric_limit(np.array([np.nan, 0.0])) == 1.0


class _Recorder:
    """A painter that notes every text drawn: (the box asked for, the box used, the text)."""

    def __init__(self, painter):
        self._painter, self.texts = painter, []

    def drawText(self, rect, flags, value):  # Qt's name
        used = self._painter.drawText(rect, flags, value)
        self.texts.append((rect, used, value))
        return used

    def __getattr__(self, name):
        return getattr(self._painter, name)


def _painted_panels(session_path, tmp_path, shot_id: str, metadata: dict, **changes):
    """A panel of ``shot_id`` (with ``metadata`` added, and the record's fields ``changes``) at
    each per-page count, painted on a PDF page: (per page, cell in mm, the recorder, the
    record, the rows the panel lists)."""
    from dataclasses import replace

    from PySide6 import QtGui

    from app.sheet.content import PER_PAGE_CHOICES
    from app.sheet.document import _writer
    from app.sheet.kit import Pages, ensure_gui_application
    from app.sheet.shot_panel import number_rows, paint_shot, panel_cells
    from core.store import Session

    ensure_gui_application()
    with Session.open(session_path, writable=False) as session:
        record = session[shot_id]
        record = replace(record, metadata={**record.metadata, **metadata}, **changes)
        result = session.load_result(shot_id)
    writer = _writer(tmp_path / f"{shot_id}.pdf", "t")
    painter = QtGui.QPainter()
    assert painter.begin(writer)
    out = []
    try:
        pages = Pages(painter, writer, "t", len(PER_PAGE_CHOICES))
        for per_page in PER_PAGE_CHOICES:
            pages.new_page("panel")
            cell = panel_cells(per_page, pages.body())[-1]  # 4 per page: the right column
            recorder = _Recorder(painter)
            paint_shot(recorder, cell, record, result)
            out.append((per_page, cell, recorder, record, number_rows(record, cell[2] < 120)))
    finally:
        painter.end()
    return out


LONG_METADATA = {"ball_type": "cricket", "speed_nominal_m_s": 30.0, "spin_rpm": 1000.0,
                 "notes": "launch 2 of 3; return mirror knocked out of line: no light below "
                          "the ball", "seam_deg": 10.0}


@pytest.mark.parametrize("version", ["", "0.2.0"])
def test_every_panel_shows_all_its_lines_inside_it(reviewed_session, tmp_path, version):
    """At every per-page count a panel (an unusable shot with a reason, long notes and the
    metadata; measured by this wakeline, or by one whose ± is outdated) lists every row of its
    numbers, and every text it draws, the reference vector's speed included, stays inside the
    panel; the header's metadata is one line in its band."""
    from app.sheet.content import metadata_line
    from app.sheet.kit import mm

    for per_page, cell, recorder, record, rows in _painted_panels(
            reviewed_session, tmp_path, "s03", LONG_METADATA, software_version=version):
        assert any("0.2.0" in row.value for row in rows) == (version == "0.2.0")
        x, y, w, h = (mm(v) for v in cell)
        drawn = [value for _rect, _used, value in recorder.texts]
        assert not any(v.startswith("…") for v in drawn), (per_page, drawn)
        for row in rows:
            assert row.label == "" or row.label in drawn, (per_page, row.label)
            assert row.value in drawn, (per_page, row.value)
        assert any(v.endswith(" m/s") for v in drawn), per_page  # the reference vector
        for _rect, used, value in recorder.texts:
            if not value:
                continue
            assert (used.left() >= x - 1 and used.right() <= x + w + 1 and used.top() >= y - 1
                    and used.bottom() <= y + h + 1), (per_page, value)
        header = [used for _r, used, v in recorder.texts if v == metadata_line(record)]
        if w >= mm(120):  # wide panels carry it in the header; narrow ones with the numbers
            assert header and header[0].bottom() <= y + mm(8), per_page


def test_numbers_that_cannot_fit_say_so():
    """A box too small for the rows shows as many as fit and a line with "…" naming the
    rows left out (never a silent cut)."""
    from PySide6 import QtGui

    from app.sheet.kit import ensure_gui_application
    from app.sheet.shot_panel import NumberRow, _paint_numbers

    ensure_gui_application()
    image = QtGui.QImage(2000, 2000, QtGui.QImage.Format.Format_RGB32)
    image.setDotsPerMeterX(round(300 / 0.0254))
    image.setDotsPerMeterY(round(300 / 0.0254))
    painter = QtGui.QPainter(image)
    recorder = _Recorder(painter)
    rows = [NumberRow(f"row{k}", f"value {k}") for k in range(12)]
    _paint_numbers(recorder, (0.0, 0.0, 80.0, 20.0), rows)
    painter.end()
    drawn = [value for _rect, _used, value in recorder.texts]
    assert "value 0" in drawn and "value 11" not in drawn
    mark = [v for v in drawn if v.startswith("…")]
    assert len(mark) == 1 and "row11" in mark[0] and "row0" not in mark[0]


def test_a_shot_has_the_same_vorticity_colours_on_the_sheet_as_in_the_window(
        reviewed_session, tmp_path, monkeypatch):
    from app.review import colours
    from app.review.scales import shot_limit
    from app.sheet import make_sheet
    from core.store import Session

    used = []
    draw = colours.vorticity_rgb
    monkeypatch.setattr(colours, "vorticity_rgb",
                        lambda w, limit, *a, **k: used.append(limit) or draw(w, limit, *a, **k))
    with Session.open(reviewed_session, writable=False) as session:
        make_sheet(session, tmp_path / "one.pdf", per_page=1, shot_ids=["s02"])
        expected = shot_limit(session.load_result("s02").vorticity_1_s)  # the canvas's range
    assert used == [expected]


def test_a_failed_shot_shows_its_last_good_field_and_says_so(reviewed_session, tmp_path):
    from app.sheet import make_sheet
    from core.store import Session

    with Session.open(reviewed_session) as session:
        # the reason's end matters most ("not found", "changed since import"); the panel's
        # title names the shot, the table keeps the whole line
        session.save_failure("s02", "shot s02: frame file /media/lab disk/2026/campaign_04/"
                                    "launches/s02_b.tif not found")
    out = tmp_path / "sheet.pdf"
    with Session.open(reviewed_session, writable=False) as session:
        make_sheet(session, out, shot_ids=["s02"])
    _pages, text = _pdf_text(out)
    text = text.replace("\ufb01", "fi")  # the PDF's "fi" ligature
    assert "the latest failed: frame file s02_b.tif not found" in text
    assert "No field" not in text


def test_a_sheet_qt_could_not_write_whole_is_an_error_and_the_earlier_one_stays(
        reviewed_session, tmp_path, monkeypatch):
    # on a full disk Qt's PDF writer only warned, and the window said the sheet was written
    # over an earlier one that was now empty
    from app.sheet import document, make_sheet
    from core import WakelineError
    from core.store import Session

    out = tmp_path / "sheet.pdf"
    out.write_bytes(b"%PDF-1.4 the earlier sheet %%EOF")
    real = document._writer
    monkeypatch.setattr(document, "_writer",  # its bytes go nowhere, as to a full disk
                        lambda path, title: real(tmp_path / "lost.pdf", title))
    with Session.open(reviewed_session, writable=False) as session, pytest.raises(
            WakelineError, match=r"sheet.pdf: cannot write here \(the PDF came out incomplete"):
        make_sheet(session, out, per_page=2)
    assert out.read_bytes() == b"%PDF-1.4 the earlier sheet %%EOF"
    assert not out.with_name("sheet.pdf.part").exists()


def test_one_ball_gets_one_scale_bar_whatever_its_pictures_crop():
    # the demo's identical shots sw01 and sw02 got 50 and 100 mm: each picture's crop follows
    # its fitted circle, and 20 mm of page was 99.4 mm of one and 102.5 mm of the other
    from types import SimpleNamespace

    from app.sheet.kit import mm
    from app.sheet.shot_panel import scale_bar_mm

    shot = SimpleNamespace(scale_mm_per_px=0.2106,
                           settings=SimpleNamespace(ball_diameter_mm=71.6, ball_type=None))
    at = [mm(20) / (length / 0.2106) for length in (99.4, 102.5)]  # device units per px
    assert [scale_bar_mm(shot, scale) for scale in at] == [50.0, 50.0]
    # a picture where the ball's length would be lost or too long: the page's own round length
    assert scale_bar_mm(shot, mm(4) / (50 / 0.2106)) == 200.0
    typed = SimpleNamespace(scale_mm_per_px=0.2106,
                            settings=SimpleNamespace(ball_diameter_mm=None, ball_type="softball"))
    assert scale_bar_mm(typed, at[0]) == 50.0  # a 12 in softball: 97 mm across


def test_a_sheet_stopped_inside_a_saved_painter_state_ends_its_painter_cleanly(qtlog):
    # Ctrl+C can arrive anywhere in the painting: Qt warned of a painter ended with saved states
    from PySide6 import QtGui

    from app.sheet.kit import saved

    image = QtGui.QImage(16, 16, QtGui.QImage.Format.Format_RGB32)
    painter = QtGui.QPainter(image)
    with pytest.raises(KeyboardInterrupt), saved(painter):
        painter.translate(3, 3)
        raise KeyboardInterrupt
    assert painter.transform().isIdentity()
    painter.end()
    assert not [r for r in qtlog.records if "saved states" in r.message]
