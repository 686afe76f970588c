"""One formatter of a shot's numbers: the window's readout, the shot sheet and `wakeline pair`
say the same thing the same way."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from app.review.text import (
    angle_text,
    flight_text,
    layer_text,
    proposal_text,
    shot_rows,
    speed_text,
    vectors_text,
    wake_text,
)
from core.results import Flight, SeparationResult, SideProposal
from core.store import Pick, ShotRecord
from core.summary import ShotSummary

SUMMARY = ShotSummary.from_dict({
    "ball": {"frame_a": {"center_px": [120.0, 80.5], "radius_px": 30.0}},
    "flight": {"direction_deg": 178.25, "speed_m_s": 30.06, "displacement_px": [-6.0, 0.2],
               "source": "ball displacement"},
    "separation": {"upper": {"angle_deg": 12.34, "uncertainty_deg": 1.5, "quality": 0.8,
                             "departure_deg": 8.4, "layer_px": 2.46},
                   "lower": {"angle_deg": None, "reason": "the image edge cuts the band"},
                   "wake_deflection_deg": -3.0, "wake_state": "undetermined"},
    "scale_mm_per_px": 0.078, "dt_s": 2e-5,
    "vectors": {"count": 100, "valid": 90, "replaced": 6, "masked": 4, "window_px": 32,
                "spacing_px": 16.0},
    "warnings": ["first warning"],
})


def test_the_words_and_number_formats():
    assert (angle_text(12.34), angle_text(-8.96), angle_text(None)) == ("+12.3°", "-9.0°", "—")
    assert angle_text(math.nan) == "—" and angle_text(3.0, signed=False) == "3.0°"
    assert proposal_text(SUMMARY.side("upper")) == "+12.3° ± 1.5°, quality 0.80"
    assert proposal_text(SUMMARY.side("lower")) == "none (the image edge cuts the band)"
    assert flight_text(SUMMARY.flight) == "178.2° at 30.1 m/s"
    assert flight_text(Flight(90.0, None, (0.0, -1.0), "override")) == (
        "90.0° (override), speed unknown (needs dt and a scale)")
    assert wake_text(SUMMARY.separation) == "undetermined, deflected -3.0° from the flight axis"
    with_uncertainty = SeparationResult(SideProposal(None), SideProposal(None), -3.04,
                                        wake_deflection_uncertainty_deg=1.26)
    assert wake_text(with_uncertainty) == "undetermined, deflected -3.0° ± 1.3° from the flight axis"
    assert wake_text(SeparationResult(SideProposal(None), SideProposal(None))) == "undetermined"
    assert vectors_text(SUMMARY.vectors) == (
        "90 valid, 6 replaced, 4 masked of 100 (32 px windows, 16 px apart)")
    # blank frames: no window has a correlation peak, none can be replaced; the counts add up
    from core.summary import VectorCounts

    assert vectors_text(VectorCounts(961)) == "0 valid, 0 replaced, 0 masked of 961; 961 gave none"


def test_pair_prints_the_rows_of_the_formatter():
    from app.cli.pair import describe

    lines = describe(SUMMARY).splitlines()
    rows = [f"{label}: {text}" for label, text in shot_rows(SUMMARY)]
    assert lines[:len(rows)] == rows and "flight: 178.2° at 30.1 m/s" in lines
    # then the warnings, and why there is no Reynolds number (no ball diameter given)
    note = ("note: no Reynolds number: it needs the ball's diameter (--ball-diameter or "
            "--ball-type)")
    assert lines[len(rows):] == ["warning: first warning", note]
    # with the diameter given, the number is missing for another reason
    from dataclasses import replace

    given = replace(SUMMARY, settings={**SUMMARY.settings, "ball_diameter_mm": 71.6})
    assert describe(given).splitlines()[-1] == (
        "note: no Reynolds number: the air hardly moves past the ball")


def test_readout_and_sheet_use_the_same_words(qtbot):
    from app.qt.readout import ReadoutPanel
    from app.sheet.content import side_detail

    record = ShotRecord("t1", {}, state="processed", summary=SUMMARY,
                        pick=Pick(status="accepted"))
    panel = ReadoutPanel()
    qtbot.addWidget(panel)
    panel.show_record(record)
    assert panel.cells[("proposed", "upper")].text() == angle_text(12.34)
    assert panel.flight_speed.text() == speed_text(30.06)
    assert panel.wake.text() == wake_text(SUMMARY.separation)
    assert panel.vectors.text() == vectors_text(SUMMARY.vectors)
    # the same words; the sheet gives angles to 0.01 deg
    assert panel.cells[("layer", "upper")].text() == layer_text(SUMMARY.side("upper"))
    assert side_detail(record, "upper").endswith(
        f"{proposal_text(SUMMARY.side('upper'), 2)}; layer {layer_text(SUMMARY.side('upper'))}")
    assert side_detail(record, "upper").endswith("+12.34° ± 1.50°, quality 0.80; layer 8°, 2.5 px")


@pytest.mark.parametrize("status", ["to review", "unusable"])
def test_no_final_angle_says_why_on_the_sheet(status):
    from app.sheet.content import final_text

    record = ShotRecord("t1", {}, summary=SUMMARY, pick=Pick(status=status, reason="x"))
    assert final_text(record, "upper") == {"to review": "— (not reviewed)",
                                          "unusable": "— (unusable)"}[status]


def test_powers_of_ten_and_microseconds_are_written_as_printed():
    """Reynolds numbers as ``1.43 × 10⁵`` (superscript figures, never a caret) in the readout,
    the sheet and ``wakeline pair``; the time between frames in µs on the sheet."""
    from app.review.text import reynolds_text, scientific_text, times_ten_text
    from app.sheet.content import timing_text

    summary = ShotSummary.from_dict({"reynolds": {"value": 143_210.0, "air_temp_c": 19.5}})
    assert reynolds_text(summary).startswith("1.43 × 10⁵ (air at 19.5 °C)")
    assert "^" not in reynolds_text(summary)
    # no temperature given: the 20 deg C the number assumes is named as assumed
    assumed = ShotSummary.from_dict({"reynolds": {"value": 143_210.0, "air_temp_c": 20.0},
                                     "settings": {"air_temp_c": None}})
    assert reynolds_text(assumed).startswith("1.43 × 10⁵ (air at 20 °C, assumed)")
    given = ShotSummary.from_dict({"reynolds": {"value": 143_210.0, "air_temp_c": 20.0},
                                   "settings": {"air_temp_c": 20.0}})
    assert reynolds_text(given).startswith("1.43 × 10⁵ (air at 20 °C)")
    # the readout's narrow cell: the number and the regime's head (the rest on hovering)
    from app.review.text import reynolds_short_text

    regime = ShotSummary.from_dict({"reynolds": {"value": 143_210.0, "regime": (
        "below the drag crisis: a smooth ball's layer separates laminar")}})
    assert reynolds_short_text(regime) == "1.43 × 10⁵, below the drag crisis"
    assert reynolds_short_text(ShotSummary.from_dict({})) == "—"
    assert scientific_text(2.5e-7) == "2.50 × 10⁻⁷" and scientific_text(512.0) == "512"
    # three figures always, as the conditions' ranges write them ("1.4 × 10⁵" beside "1.40")
    assert scientific_text(1.4e5) == "1.40 × 10⁵"
    assert times_ten_text("1.39-1.44", 12) == "1.39-1.44 × 10¹²"
    record = ShotRecord("t1", {"ball_diameter_mm": 71.6}, state="processed", summary=SUMMARY,
                        pick=Pick())
    # no scale in the manifest: the one used came from the ball, and the sheet says so
    # a value and its unit are kept on one line (no-break spaces)
    assert timing_text(record) == ("dt 20.0\u00a0µs, 0.078\u00a0mm/px from the ball, "
                                   "ball\u00a071.6\u00a0mm")
    given = ShotRecord("t1", {"ball_diameter_mm": 71.6, "scale_mm_per_px": 0.078},
                       state="processed", summary=SUMMARY, pick=Pick())
    assert timing_text(given) == "dt 20.0\u00a0µs, 0.078\u00a0mm/px, ball\u00a071.6\u00a0mm"


def test_a_note_and_its_author_are_set_apart_on_the_sheet():
    from app.sheet.content import note_text
    from app.sheet.shot_panel import failure_words

    pick = Pick(note="seam side leaves late", note_who="ana", note_when="2026-12-05T10:20:30Z")
    record = ShotRecord("t1", {}, state="processed", summary=SUMMARY, pick=pick)
    assert note_text(record) == "seam side leaves late \u2014 ana, 2026-12-05 10:20"
    anonymous = ShotRecord("t1", {}, state="processed", summary=SUMMARY,
                           pick=Pick(note="older file"))
    assert note_text(anonymous) == "older file"
    # a failure on a panel: without the shot's name (the title says it), files by their names
    assert failure_words("shot t1: frame file /data/run 3/t1_a.tif not found", "t1") == (
        "frame file t1_a.tif not found")


def test_the_meaning_of_the_uncertainty_gives_the_factor_it_was_made_with():
    from app.review.text import uncertainty_meaning
    from core.separation import COVERAGE_K

    budget = {"fit": 0.6, "extrapolation": 0.8}  # root sum of squares 1.0
    now = uncertainty_meaning(SideProposal(5.0, COVERAGE_K, budget=budget))
    before = uncertainty_meaning(SideProposal(5.0, 2.0, budget=budget))  # made by 0.1
    assert f"{COVERAGE_K:g} × the root sum of squares" in now
    assert "2 × the root sum of squares" in before
    assert now.splitlines()[1:] == [
        "  extrapolation 0.80°: where a shallow layer meets the wall, below what the images see",
        "  fit 0.60°: what the particle images alone allow"]


def test_every_source_of_the_uncertainty_has_a_gloss():
    # the names the separation's budget uses (core.separation, docs/separation_accuracy.md)
    from app.review.text import BUDGET_GLOSS

    doc = (Path(__file__).parents[1] / "docs" / "separation_accuracy.md").read_text()
    table = doc.split("| budget entry | what it is |")[1].split("\n\n")[0]
    names = {line.split("|")[1].strip() for line in table.splitlines()[2:] if line.startswith("|")}
    assert names == set(BUDGET_GLOSS)


def test_a_result_made_by_an_earlier_uncertainty_method_is_named():
    # 0.3 changed how the ± is made (refits, the extrapolation arc, the factor), 0.3.5 added
    # the layer form's entry: results made before keep theirs until processed again, and the
    # readout says so
    from dataclasses import replace as with_

    from app.review.text import outdated_uncertainty_note
    from core.results import SeparationResult, uncertainty_outdated
    from core.store.records import ShotRecord
    from core.summary import ShotSummary

    assert uncertainty_outdated("0.1.0") and uncertainty_outdated("0.2.0")
    assert uncertainty_outdated("0.3.0") and uncertainty_outdated("0.3.4")
    assert uncertainty_outdated("0.3")  # a missing part counts as 0
    assert uncertainty_outdated("0.3.5") and uncertainty_outdated("0.3.15")  # 0.3.16: laminar
    # 0.3.18: the profile converged (0.3.17's outer stream was taken back)
    assert uncertainty_outdated("0.3.16") and uncertainty_outdated("0.3.17")
    assert not uncertainty_outdated("0.3.18") and not uncertainty_outdated("0.3.19")
    assert not uncertainty_outdated("0.4") and not uncertainty_outdated("1.0")
    assert not uncertainty_outdated("") and not uncertainty_outdated("dev")
    summary = ShotSummary(SeparationResult(SideProposal(5.0, 3.0), SideProposal(None)))
    record = ShotRecord("s1", {}, summary=summary, software_version="0.2.0")
    assert "0.2.0" in outdated_uncertainty_note(record)
    assert "Reprocess this shot" in outdated_uncertainty_note(record)
    assert outdated_uncertainty_note(with_(record, software_version="0.3.18")) == ""
    assert outdated_uncertainty_note(with_(record, summary=None)) == ""


def test_a_remark_on_a_proposal_made_is_shown_not_only_hovered(qtbot):
    # glare hiding the wall widens a proposal's uncertainty; the window's notes and the sheet
    # say why, beside the measurement's own warnings
    from app.qt.readout import ReadoutPanel
    from app.review.text import proposal_remarks
    from app.sheet.shot_panel import number_rows

    remark = "glare hides the wall from -19° to 19°: the layer may leave it anywhere there"
    summary = ShotSummary(SeparationResult(SideProposal(5.0, 30.0, 0.1, remark),
                                           SideProposal(None, reason="no separated layer")),
                          warnings=["first warning"])
    assert proposal_remarks(summary) == [f"upper side: {remark}"]
    assert proposal_remarks(None) == []
    record = ShotRecord("t1", {}, state="processed", summary=summary,
                        pick=Pick(status="to review"))
    panel = ReadoutPanel()
    qtbot.addWidget(panel)
    panel.show_record(record)
    assert f"upper side: {remark}" in panel.notes.text()
    assert "first warning" in panel.notes.text()
    assert "no separated layer" not in panel.notes.text()  # said where the angle would be
    rows = {row.label: row.value for row in number_rows(record)}
    assert rows["proposals"] == f"upper side: {remark}"
    assert rows["warnings"] == "first warning"
    # and `wakeline pair` prints the same row (its rows need a ball to show the proposals)
    from dataclasses import replace as with_

    with_ball = with_(SUMMARY, separation=summary.separation)
    assert ("proposals", f"upper side: {remark}") in shot_rows(with_ball)
    assert "proposals" not in dict(shot_rows(SUMMARY))


def test_the_fitted_layer_is_told_and_a_start_hard_to_place_is_named():
    # near-tangential layers and layers thinner than the particle images: the data cannot
    # tell where they start (docs/separation_accuracy.md, Known limits)
    from app.review.text import layer_meaning

    steep = SideProposal(10.0, 2.0, departure_deg=12.3, layer_px=3.24)
    assert layer_text(steep) == "12°, 3.2 px"
    assert layer_meaning(steep, 0.2) == ("the fitted shear layer leaves the wall at 12.3° to its "
                                         "tangent; its vorticity thickness at separation is "
                                         "3.2 px (0.65 mm)")
    flat_thin = SideProposal(10.0, 6.0, departure_deg=0.0, layer_px=1.2)
    assert layer_meaning(flat_thin).endswith(
        "is 1.2 px. It leaves nearly along the wall: the images hardly show where it starts, and "
        "its ± widens with that. It is thinner than the particle images: where it starts leans "
        "on the thickness prior, and its ± may fall short; read the proposal as a range")
    # judged on the numbers as shown: "5°, 1.5 px" is neither shallow nor thin
    shown = SideProposal(10.0, 2.0, departure_deg=4.6, layer_px=1.46)
    assert layer_text(shown) == "5°, 1.5 px" and layer_meaning(shown).endswith("is 1.5 px")
    shallow = SideProposal(10.0, 2.0, departure_deg=2.0, layer_px=3.0)
    assert layer_meaning(shallow).endswith("its ± widens with that; read the proposal as a range")
    assert layer_text(SideProposal(None, reason="refused")) == "—"
    assert layer_meaning(SideProposal(None)) == ""
