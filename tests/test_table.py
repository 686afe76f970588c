"""The table of picks: one row per shot, proposed and final angles, empty cells for no value."""

from __future__ import annotations

import csv
from dataclasses import replace

import pytest
from data.session_helpers import fake_result, write_shot_folder

from app.cli import main
from core import WakelineError
from core.store import Session, import_folder, session_table_rows, write_table_csv

REQUIRED = ("shot", "upper_proposed_deg", "lower_proposed_deg", "upper_final_deg",
            "lower_final_deg", "review_status")


@pytest.fixture
def session_path(tmp_path):
    """S0 accepted, S1 adjusted on the upper side, S2 unusable, S3 never processed."""
    import_folder(write_shot_folder(tmp_path / "src", 4), tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        for shot_id, upper, lower in (("S0", 5.0, -3.0), ("S1", 7.5, 1.25), ("S2", None, 2.0)):
            s.save_result(shot_id, fake_result(s.settings_for(shot_id), upper, lower))
        s.set_pick("S0", status="accepted", who="ann")
        s.set_pick("S1", status="adjusted", upper_deg=11.0, note="Schräg – später", who="bö")
        s.set_pick("S2", status="unusable", reason="ball cut by the frame edge", who="ann")
    return tmp_path / "s.h5"


def _read(path) -> dict[str, dict[str, str]]:
    with open(path, encoding="utf-8", newline="") as fh:
        return {row["shot"]: row for row in csv.DictReader(fh)}


def test_table_command_writes_one_row_per_shot(session_path, tmp_path, capsys):
    out = tmp_path / "picks.csv"
    assert main(["table", str(session_path), "-o", str(out)]) == 0
    assert "4 shot(s)" in capsys.readouterr().out
    rows = _read(out)
    assert list(rows) == ["S0", "S1", "S2", "S3"]
    assert set(REQUIRED) <= set(next(iter(rows.values())))
    s0, s1, s2, s3 = (rows[k] for k in ("S0", "S1", "S2", "S3"))
    assert (s0["upper_final_deg"], s0["lower_final_deg"], s0["review_status"]) == (
        "5", "-3", "accepted")
    assert (s1["upper_proposed_deg"], s1["upper_final_deg"]) == ("7.5", "11")
    assert s1["lower_final_deg"] == "1.25"  # the side left alone keeps its proposal
    assert s1["review_note"] == "Schräg – später" and s1["reviewed_by"] == "bö"
    assert (s2["upper_proposed_deg"], s2["upper_final_deg"], s2["lower_final_deg"]) == ("", "", "")
    assert s2["unusable_reason"] == "ball cut by the frame edge"
    assert s3["state"] == "unprocessed" and s3["upper_proposed_deg"] == ""
    assert s3["review_status"] == "to review" and s3["wake_state"] == ""
    assert s0["upper_uncertainty_deg"] == "1.5" and s0["wake_deflection_deg"] == "4"
    assert s0["wake_deflection_uncertainty_deg"] == "1.2"
    assert s0["seam_deg"] == "0" and s0["dt_s"] == "2e-05" and s0["notes"] == "shot 0"
    # each side's quality, as the window's list and the sheet give it; none without a proposal
    assert (s0["upper_quality"], s0["lower_quality"]) == ("0.8", "0.7")
    assert (s2["upper_quality"], s3["upper_quality"]) == ("", "")


def test_an_unusable_shot_reports_no_wake(session_path, tmp_path, capsys):
    """The analyst marked the shot unusable: its wake deflection is measured (4 deg) but not a
    result, so the table leaves it empty as the sheet shows "wake —" and the final angles are
    empty; marked back for review, it is reported again."""
    out = tmp_path / "picks.csv"
    assert main(["table", str(session_path), "-o", str(out)]) == 0
    s2 = _read(out)["S2"]
    assert (s2["wake_deflection_deg"], s2["wake_deflection_uncertainty_deg"], s2["wake_state"],
            s2["review_status"]) == ("", "", "", "unusable")
    with Session.open(session_path) as s:
        assert s["S2"].summary.separation.wake_deflection_deg == 4.0  # kept in the session
        s.set_pick("S2", status="to review", who="ann")
    assert main(["table", str(session_path), "-o", str(out)]) == 0
    assert _read(out)["S2"]["wake_deflection_deg"] == "4"


def test_units_are_in_the_column_names(session_path):
    with Session.open(session_path, writable=False) as s:
        header, rows = session_table_rows(s)
    assert len(rows) == 4 and all(len(r) == len(header) for r in rows)
    numeric = [h for h in header if h.startswith(("upper_", "lower_", "flight_"))
               and not h.endswith("_quality")]  # 0-1, no unit
    assert all(h.endswith(("_deg", "_m_s")) for h in numeric)


def test_table_can_be_written_while_the_session_is_open_for_writing(session_path, tmp_path):
    with Session.open(session_path) as writer:
        writer.set_pick("S3", status="unusable", reason="no seeding")
        assert main(["table", str(session_path), "-o", str(tmp_path / "t.csv")]) == 0
    assert _read(tmp_path / "t.csv")["S3"]["review_status"] == "unusable"


def test_cells_a_spreadsheet_would_run_as_formulas_are_quoted(tmp_path):
    src = write_shot_folder(tmp_path / "src", 2)
    (src / "shots.csv").write_text(
        "shot,dt_s,scale_mm_per_px,ball_diameter_mm,seam_deg,notes,operator,offset\n"
        'S0,2e-05,0.08,71.6,-10,"=HYPERLINK(""http://x"")",@ann,-3.5\n'
        "S1,2e-05,0.08,71.6,5,+1 spare,-bo,+2\n", encoding="utf-8")
    import_folder(src, tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        s.set_pick("S0", status="unusable", reason="-ball out")
    out = tmp_path / "picks.csv"
    assert main(["table", str(tmp_path / "s.h5"), "-o", str(out)]) == 0
    rows = _read(out)
    assert rows["S0"]["notes"] == "'=HYPERLINK(\"http://x\")" and rows["S0"]["operator"] == "'@ann"
    assert rows["S0"]["unusable_reason"] == "'-ball out"
    assert rows["S1"]["notes"] == "'+1 spare" and rows["S1"]["operator"] == "'-bo"
    assert rows["S0"]["seam_deg"] == "-10" and rows["S0"]["offset"] == "-3.5"  # numbers stay
    assert rows["S1"]["offset"] == "+2"


def test_the_table_is_never_written_over_its_session(session_path):
    before = session_path.read_bytes()
    with Session.open(session_path, writable=False) as s, pytest.raises(
            WakelineError, match=r"s\.h5: is the session s\.h5 itself"):
        write_table_csv(s, session_path)  # as the window's export could
    assert session_path.read_bytes() == before


def test_the_table_says_why_a_side_has_no_proposal(tmp_path):
    # a shot processed with no proposal on either side once gave no reason anywhere in the table
    import_folder(write_shot_folder(tmp_path / "src", 1), tmp_path / "s.h5")
    reason = "too few particle images beside the ball on this side (12% of the air around it)"
    with Session.open(tmp_path / "s.h5") as s:
        result = fake_result(s.settings_for("S0"), None, 4.0)
        result.separation = replace(result.separation,
                                    upper=replace(result.separation.upper, reason=reason))
        s.save_result("S0", result)
    assert main(["table", str(tmp_path / "s.h5"), "-o", str(tmp_path / "t.csv")]) == 0
    assert _read(tmp_path / "t.csv")["S0"]["proposal_notes"] == f"upper: {reason}"


def test_the_table_and_the_sheet_say_which_shots_need_processing_again(tmp_path):
    # shots measured with settings since changed once read "processed" like the others
    from app.sheet import make_sheet

    import_folder(write_shot_folder(tmp_path / "src", 3), tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        for shot in ("S0", "S1"):
            s.save_result(shot, fake_result(s.settings_for(shot)))
        s.set_processing_settings({"piv": {"passes": [{"window_px": 48, "overlap": 0.5}]}})
        s.save_result("S1", fake_result(s.settings_for("S1")))  # S1 measured again
    assert main(["table", str(tmp_path / "s.h5"), "-o", str(tmp_path / "t.csv")]) == 0
    rows = _read(tmp_path / "t.csv")
    assert [rows[s]["needs_processing"] for s in ("S0", "S1", "S2")] == ["yes", "no", "yes"]
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        make_sheet(s, tmp_path / "s.pdf")
    from pypdf import PdfReader

    cover = " ".join(PdfReader(str(tmp_path / "s.pdf")).pages[0].extract_text().split())
    assert ("2 processed (1 with other settings than the session's now or by an older "
            "wakeline: process again), 1 unprocessed") in cover


def test_warnings_and_checks_have_a_column_of_their_own(tmp_path):
    """What the window's readout and the sheet show beside a shot's numbers reaches the table:
    the measurement's warnings and the checks of its ball and flight against the manifest."""
    src = write_shot_folder(tmp_path / "src", 2)
    (src / "shots.csv").write_text(
        "shot,dt_s,scale_mm_per_px,ball_diameter_mm,speed_nominal_m_s\n"
        "S0,2e-05,0.08,71.6,30\nS1,2e-05,0.08,71.6,50\n", encoding="utf-8")
    import_folder(src, tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        for shot_id in ("S0", "S1"):
            result = fake_result(s.settings_for(shot_id))  # flies at 30 m/s
            if shot_id == "S0":
                result.warnings = ["frames look swapped (the ball moves against the air)"]
            s.save_result(shot_id, result)
        header, rows = session_table_rows(s)
    assert header[-3:] == ["warnings", "upper_quality", "lower_quality"]
    assert header[-4] == "needs_processing"
    cells = {row[0]: row[-3] for row in rows}
    assert cells["S0"] == "frames look swapped (the ball moves against the air)"
    # 30 m/s measured against 50 nominal (core.plausibility's speed check)
    assert "nominal" in cells["S1"] and "frames look swapped" not in cells["S1"]
