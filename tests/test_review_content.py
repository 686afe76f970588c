"""What a session keeps beyond each shot's pick: grouping columns and other analysts' reviews
(format version 2), their import from a table, and the agreement of two reviews."""

import json
import shutil
from pathlib import Path

import h5py
import pytest
from data.make_session_v1 import EXPECTED as V1
from data.make_session_v2 import EXPECTED as V2
from data.session_helpers import fake_result, write_shot_folder

from app.cli import main
from core import WakelineError
from core.agreement import compare_reviews, latest_layer
from core.store import FORMAT_VERSION, Session, import_folder
from core.store.reviews import LayerPick, ReviewLayer, read_review_csv

DATA = Path(__file__).resolve().parent / "data"
REVIEW_HEADER = ("shot,review_status,upper_final_deg,lower_final_deg,upper_uncertainty_deg,"
                 "lower_uncertainty_deg,unusable_reason,reviewed_by")


@pytest.fixture
def session_path(tmp_path):
    """Three processed shots S0-S2 (fake results: upper +5.0 ± 1.5, lower -3.0 ± 2.0)."""
    folder = write_shot_folder(tmp_path / "shots")
    path = tmp_path / "s.h5"
    import_folder(folder, path)
    with Session.open(path) as s:
        for shot in s:
            s.save_result(shot, fake_result(s.settings_for(shot)))
        s.set_pick("S0", status="accepted")
        s.set_pick("S1", status="adjusted", upper_deg=9.0)
        s.set_pick("S2", status="unusable", reason="fog")
    return path


def _review(tmp_path, rows, name="theirs.csv") -> Path:
    path = tmp_path / name
    path.write_text("\n".join([REVIEW_HEADER, *rows]) + "\n", encoding="utf-8")
    return path


def test_grouping_and_layers_survive_the_journal_and_a_compaction(session_path, tmp_path):
    layer = read_review_csv(_review(tmp_path, ["S0,accepted,5.5,-3,,,,bea"]), ["S0", "S1", "S2"])
    assert layer.name == "bea" and layer.picks["S0"].final_deg("upper") == 5.5
    s = Session.open(session_path)
    s.set_conditions_by(["seam_deg"])
    s.add_review_layer(layer)
    s._journal.close()  # left as a killed writer leaves it: only the journal holds the changes
    s._lock.release()
    with Session.open(session_path) as again:
        assert again.conditions_by() == ["seam_deg"]
        assert again.review_layers()["bea"].picks["S0"].upper_deg == 5.5
        assert again["S0"].pick.status == "accepted"  # the session's own pick is untouched
    with Session.open(session_path, writable=False) as compacted:
        assert compacted.conditions_by() == ["seam_deg"]
        assert list(compacted.review_layers()) == ["bea"]
    with h5py.File(session_path, "r") as f:
        assert f.attrs["format_version"] == FORMAT_VERSION == 2


def test_the_committed_version_one_file_opens_without_grouping_or_layers_and_is_upgraded(
        tmp_path):
    copy = tmp_path / "v1.h5"
    shutil.copyfile(DATA / "session_v1.h5", copy)
    with Session.open(copy) as s:
        assert s.conditions_by() is None and s.review_layers() == {}
        s.set_conditions_by(["seam_deg"])
    with Session.open(copy, writable=False) as s:
        assert s.conditions_by() == ["seam_deg"] and list(s) == V1["shots"]
    with h5py.File(copy, "r") as f:
        assert f.attrs["format_version"] == 2


def test_the_committed_version_two_file_keeps_its_grouping_and_layer():
    with Session.open(DATA / "session_v2.h5", writable=False) as s:
        assert s.name == V2["name"] and list(s) == V2["shots"]
        assert s.conditions_by() == V2["conditions_by"]
        layer = s.review_layers()[V2["layer"]]
        theirs = V2["theirs T1"]
        assert layer.picks["T1"].final_deg("upper") == theirs["upper_deg"]
        assert layer.picks["T3"].status == "unusable"
        assert s["T1"].final_deg("upper") == V2["T1"]["upper_deg"]


def test_a_newer_journal_record_is_named_and_nothing_is_changed(session_path):
    with Session.open(session_path) as s:
        s.set_conditions_by(["seam_deg"])
        journal = s._journal.path
        s._journal.close()
        s._lock.release()
        s._closed = True  # leave the journal as it is
    lines = journal.read_text(encoding="utf-8").splitlines()
    entry = json.loads(lines[-1])
    entry["layout"] = 2
    journal.write_text("\n".join([*lines[:-1], json.dumps(entry)]) + "\n", encoding="utf-8")
    with pytest.raises(WakelineError, match=r"line \d+ is damaged \(conditions record of layout "
                                            r"2: written by a newer wakeline\?\)"):
        Session.open(session_path, writable=False)


@pytest.mark.parametrize(("rows", "problem"), [
    (["S9,accepted,1,2,,,,x"], r"line 2 \(shot S9\): not in the session"),
    (["S0,maybe,1,2,,,,x"], r"line 2 \(shot S0\): review status 'maybe' is not one of"),
    (["S0,adjusted,abc,2,,,,x"], r"upper_final_deg 'abc' is not a number"),
    (["S0,adjusted,1,720,,,,x"], r"lower_final_deg 720 lies outside -180 to 180 deg"),
    (['S0,adjusted,1,2,,,,"x'], r"line 2: a quote opened there is never closed"),
    (["S0,unusable,,,,,,x"], r"unusable without a reason"),
    (["S0,accepted"], r"line 2 \(shot S0\): 2 cells but the header has 8 columns"),
    (["S0,accepted,1,2,,,,x", "S0,accepted,1,2,,,,x"], r"line 3 \(shot S0\): given twice"),
    (["S0,maybe,1,2,,,,x", "S9,accepted,,,,,,"],
     r"\(and 1 more bad row\(s\)\); nothing was imported"),
])
def test_a_bad_review_table_is_refused_whole_in_one_line(tmp_path, rows, problem):
    path = _review(tmp_path, rows)
    with pytest.raises(WakelineError, match=problem) as caught:
        read_review_csv(path, ["S0", "S1", "S2"])
    assert str(caught.value).startswith(str(path)) and "\n" not in str(caught.value)


def test_a_file_that_is_not_a_review_table_is_named(tmp_path):
    path = tmp_path / "shots.csv"
    path.write_text("shot,dt_s\nS0,1\n", encoding="utf-8")
    with pytest.raises(WakelineError, match=r"shots.csv: not a review table \(no column "
                                            r"'review_status'; it needs shot and "
                                            r"review_status, .* as `wakeline table` writes "
                                            r"them\)$"):
        read_review_csv(path, ["S0"])


def test_a_table_without_a_side_s_final_angles_is_refused_whole(tmp_path):
    # a colleague's decided shots without one side's final angles would lose that side's picks
    path = tmp_path / "theirs.csv"
    path.write_text("shot,review_status,upper_final,lower_final_deg\n"
                    "S0,adjusted,12.5,8.0\nS1,to review,,\n", encoding="utf-8")
    with pytest.raises(WakelineError, match=r"theirs.csv: no column 'upper_final_deg' \(is "
                                            r"'upper_final' meant\?\): the decided shots' final "
                                            r"angles would be lost; nothing was imported$"):
        read_review_csv(path, ["S0", "S1"])
    # the other side's column, there, is not taken for a misspelling of the missing one
    path.write_text("shot,review_status,upper_final_deg\nS0,adjusted,12.5\n", encoding="utf-8")
    with pytest.raises(WakelineError, match=r"theirs.csv: no column 'lower_final_deg': the "):
        read_review_csv(path, ["S0"])
    # nor is a column of wakeline's own table: its proposals are not a colleague's final angles
    path.write_text("shot,review_status,upper_proposed_deg,lower_final_deg\nS0,accepted,12.5,"
                    "8.0\n", encoding="utf-8")
    with pytest.raises(WakelineError, match=r"theirs.csv: no column 'upper_final_deg': the "):
        read_review_csv(path, ["S0"])
    # with no decided shot there is nothing to lose
    path.write_text("shot,review_status\nS1,to review\n", encoding="utf-8")
    assert read_review_csv(path, ["S0", "S1"]).picks["S1"].status == "to review"


def test_our_own_table_is_a_review_table_and_its_quoted_cells_come_back(session_path, tmp_path):
    table = tmp_path / "mine.csv"
    with Session.open(session_path) as s:
        s.set_pick("S2", status="unusable", reason="-ball out")  # written as '-ball out
    assert main(["table", str(session_path), "-o", str(table)]) == 0
    layer = read_review_csv(table, ["S0", "S1", "S2"], name="me again")
    assert layer.picks["S2"].reason == "-ball out"
    assert layer.picks["S1"].final_deg("upper") == 9.0
    assert layer.picks["S0"].uncertainty_deg("lower") == 2.0


def test_agreement_per_side_and_shots_beyond_the_combined_uncertainty(session_path, tmp_path):
    # ours: S0 accepted (+5.0, -3.0; uncertainties 1.5 and 2.0), S1 adjusted upper 9.0
    path = _review(tmp_path, ["S0,adjusted,4.0,-8.0,,1.0,,bea", "S1,accepted,9.5,-3.5,,,,bea",
                              "S2,accepted,1,1,,,,bea"])
    with Session.open(session_path) as s:
        s.add_review_layer(read_review_csv(path, list(s)))
        agreement = compare_reviews(s.values(), latest_layer(s.review_layers()))
    upper, lower = agreement.sides["upper"], agreement.sides["lower"]
    assert upper.compared == 2 and upper.mean_difference_deg == pytest.approx((1.0 - 0.5) / 2)
    assert upper.largest.shot_id == "S0" and upper.beyond == []  # 1.0 < sqrt(2) * 1.5
    # lower S0: 5.0 apart, combined sqrt(2.0^2 + 1.0^2) = 2.24 (derived): beyond
    assert [d.shot_id for d in lower.beyond] == ["S0"]
    assert lower.beyond[0].combined_uncertainty_deg == pytest.approx(5.0**0.5)
    assert agreement.flagged("S0") == ["lower"]
    assert agreement.status_differs == [("S0", "accepted", "adjusted"),
                                        ("S1", "adjusted", "accepted"),
                                        ("S2", "unusable", "accepted")]


def test_add_review_and_agreement_commands(session_path, tmp_path, capsys):
    path = _review(tmp_path, ["S0,accepted,5.0,-1.0,,,,bea"])
    assert main(["add-review", str(session_path), str(path), "--name", "Bea"]) == 0
    out = capsys.readouterr().out
    assert "review 'Bea' of 1 shot(s)" in out and "lower: 1 shot(s) in both" in out
    assert main(["agreement", str(session_path)]) == 0
    assert "mean difference -2.00 deg" in capsys.readouterr().out
    with pytest.raises(SystemExit) as usage:  # bad usage: exit 2
        main(["agreement", str(session_path), "--layer", "Nobody"])
    assert usage.value.code == 2
    assert "--layer: no review 'Nobody'" in capsys.readouterr().err
    assert main(["add-review", str(session_path), str(tmp_path / "missing.csv")]) == 1
    assert capsys.readouterr().err.strip().endswith("missing.csv: review table not found")


def test_a_layer_naming_an_unknown_shot_is_refused(session_path):
    with Session.open(session_path) as s, pytest.raises(WakelineError, match="shot S7 is not"):
        s.add_review_layer(ReviewLayer("x", picks={"S7": LayerPick()}))


def test_a_review_is_named_after_its_one_reviewer_though_some_shots_are_still_to_review(
        tmp_path):
    # a table written by `wakeline table` has no reviewer on the shots still to review: the
    # layer was once named after the file
    rows = ["S0,accepted,5.5,-3,,,,bea", "S1,to review,,,,,,", "S2,adjusted,4.0,-2,,,,bea"]
    layer = read_review_csv(_review(tmp_path, rows, "self.csv"), ["S0", "S1", "S2"])
    assert layer.name == "bea"
    two = read_review_csv(_review(tmp_path, [*rows[:2], "S2,adjusted,4.0,-2,,,,cid"], "x.csv"),
                          ["S0", "S1", "S2"])
    assert two.name == "x"  # two reviewers: the file's name


def test_the_agreement_names_the_shots_the_other_review_left_out(session_path, tmp_path):
    from core.agreement import agreement_lines

    path = _review(tmp_path, ["S0,accepted,5.0,-3.0,,,,bea"])
    with Session.open(session_path) as s:
        s.add_review_layer(read_review_csv(path, list(s)))
        agreement = compare_reviews(s.values(), latest_layer(s.review_layers()))
    lines = agreement_lines(agreement)
    assert "  not in the other review: 2 shot(s): S1, S2" in lines
    # S0 alike on both sides (+5.0, -3.0): no "largest difference" of +0.00 deg
    assert "  upper: 1 shot(s) in both; the same final angles (to 0.01 deg)" in lines


def test_a_reviewer_s_name_keeps_only_printable_characters(tmp_path):
    # a NUL byte once reached the layer's name (and the window's and the sheet's text)
    layer = read_review_csv(_review(tmp_path, ["S0,accepted,5.5,-3,,,,Bo\x00b\t"]), ["S0"])
    assert layer.name == "Bob"
    layer = read_review_csv(_review(tmp_path, ["S0,accepted,5.5,-3,,,,\x00"]), ["S0"])
    assert layer.name == "theirs"  # nothing printable left: the file's name
