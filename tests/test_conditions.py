"""Conditions: shots grouped by manifest columns, their statistics, the table by condition."""

import csv
import math
from dataclasses import replace

import pytest
from data.session_helpers import fake_result, write_shot_folder

from app.cli import main
from core.conditions import (
    Spread,
    default_columns,
    ensemble_outside,
    group_conditions,
    grouping_columns,
    reynolds_number,
    value_text,
)
from core.store import Session, import_folder
from core.summary import ShotSummary


def test_spread_is_the_student_t_interval_of_the_shot_to_shot_values():
    # values 1, 2, 3: mean 2, sd 1, t(0.975, 2) = 4.3027 (Student's t table), half-width
    # 4.3027 / sqrt(3) = 2.4841 (derived)
    spread = Spread.of([1.0, 2.0, 3.0, None])
    assert (spread.n, spread.mean, spread.sd) == (3, 2.0, 1.0)
    assert spread.half_width == pytest.approx(4.3027 / math.sqrt(3), abs=1e-4)
    assert Spread.of([4.0]) == Spread(1, 4.0) and Spread.of([]) == Spread()


def test_repeats_that_agree_keep_the_shots_own_uncertainty():
    # three shots within 0.2 deg of each other, each proposal uncertain by 6 deg: the spread's
    # interval (t(0.975, 2) 0.2 / sqrt(3) = 0.50, Student's t table) would claim the mean to
    # half a degree; the shots' own mean uncertainty over sqrt(3) (3.46) is wider and sets it.
    # A shared error that the repeats cannot show (docs/separation_accuracy.md, "The ensemble
    # and a condition's interval")
    agree = Spread.of([10.0, 10.2, 10.4], [6.0, 6.0, 6.0])
    assert agree.by_shots and agree.half_width == pytest.approx(6.0 / math.sqrt(3))
    # the spread wider than the shots' own: the t interval, as without them
    scatter = Spread.of([1.0, 2.0, 3.0], [0.5, None, 0.7])
    assert not scatter.by_shots and scatter.half_width == pytest.approx(4.3027 / math.sqrt(3),
                                                                       abs=1e-4)
    # one shot: its own interval; a missing value drops its uncertainty with it
    one = Spread.of([4.0, None], [1.5, 9.0])
    assert (one.n, one.low, one.high, one.by_shots) == (1, 2.5, 5.5, True)


def test_value_text_makes_one_condition_of_equal_numbers():
    assert value_text(30) == value_text(30.0) == value_text("30.0") == "30"
    assert value_text(" cricket ") == "cricket"
    assert value_text(None) == value_text(float("nan")) == value_text("") == ""


@pytest.fixture
def session_path(tmp_path):
    """Six processed shots: seam 0, 0, 0, 10, 10 and one without a seam angle."""
    rows = ["S3,2e-05,0.08,71.6,10,b", "S4,2e-05,0.08,71.6,10,b", "S5,2e-05,0.08,71.6,,c"]
    folder = write_shot_folder(tmp_path / "shots", count=3, extra_rows=())
    text = (folder / "shots.csv").read_text().replace(",10,", ",0,").replace(",20,", ",0,")
    (folder / "shots.csv").write_text(text + "\n".join(rows) + "\n")
    for shot in ("S3", "S4", "S5"):
        for ab in "ab":
            (folder / f"{shot}_{ab}.tif").write_bytes((folder / f"S0_{ab}.tif").read_bytes())
    path = tmp_path / "s.h5"
    import_folder(folder, path)
    angles = {"S0": (4.0, -2.0), "S1": (5.0, -3.0), "S2": (6.0, -4.0), "S3": (10.0, 0.0),
              "S4": (12.0, None), "S5": (1.0, 1.0)}
    with Session.open(path) as s:
        for shot, (upper, lower) in angles.items():
            s.save_result(shot, fake_result(s.settings_for(shot), upper, lower))
        s.set_pick("S0", status="adjusted", upper_deg=3.0)  # the analyst's angle counts
        s.set_pick("S2", status="unusable", reason="fog")  # left out
    return path


def test_conditions_take_the_final_angle_else_the_proposal_and_skip_unusable(session_path):
    with Session.open(session_path, writable=False) as s:
        records = list(s.values())
    assert grouping_columns(records)[:1] == ["seam_deg"] and default_columns(records) == [
        "seam_deg"]
    seam0, seam10, unset = group_conditions(records, ["seam_deg"])
    assert (seam0.values, seam0.shot_ids, seam0.usable_ids) == (
        {"seam_deg": "0"}, ["S0", "S1", "S2"], ["S0", "S1"])
    assert seam0.sides["upper"].mean == pytest.approx(4.0)  # adjusted 3.0 and proposed 5.0
    assert seam0.difference.mean == pytest.approx(((3 + 2) + (5 + 3)) / 2)
    assert seam10.sides["lower"].n == 1 and seam10.difference.n == 1
    assert seam0.wake_deflection.mean == pytest.approx(4.0)  # fake_result's deflection
    assert unset.label == "seam_deg (none)" and seam0.reynolds is None


def test_balls_of_another_surface_are_another_condition_by_default():
    # a white ball's shots were once pooled with a red ball's at the same seam angle
    from core.store.records import ShotRecord

    def record(shot, surface, ball):
        return ShotRecord(shot, {"ball_type": "cricket", "surface": surface, "seam_deg": 20.0,
                                 "ball": ball})

    records = [record("a", "red", "red 1"), record("b", "red", "red 2"),
               record("c", "white", "white 1")]
    assert default_columns(records) == ["ball_type", "surface", "seam_deg"]
    assert "ball" in grouping_columns(records)  # offered, not chosen: repeats may use two balls
    red, white = group_conditions(records, default_columns(records))
    assert red.shot_ids == ["a", "b"] and white.shot_ids == ["c"]


def test_the_reynolds_range_comes_from_the_summary_when_it_has_one(session_path):
    with Session.open(session_path, writable=False) as s:
        record = s["S1"]
    data = {**record.summary.to_dict(), "reynolds": {"value": 1.7e5, "air_temp_c": 20.0}}
    with_re = replace(record, summary=ShotSummary.from_dict(data))
    assert reynolds_number(with_re) == 1.7e5 and reynolds_number(record) is None
    condition = group_conditions([with_re, replace(with_re, shot_id="X")], [])[0]
    assert condition.reynolds == (1.7e5, 1.7e5) and condition.label == "all shots"


def test_table_by_writes_one_row_per_condition_and_conditions_keeps_the_grouping(
        session_path, tmp_path, capsys):
    out = tmp_path / "by.csv"
    assert main(["table", str(session_path), "--by", "seam_deg", "-o", str(out)]) == 0
    with out.open(encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["seam_deg"] for r in rows] == ["0", "10", ""]
    assert rows[0]["usable_shots"] == "2" and rows[0]["shot_ids"] == "S0 S1 S2"
    assert float(rows[0]["upper_ci_high_deg"]) > 4.0 > float(rows[0]["upper_ci_low_deg"])
    assert rows[0]["upper_ci_from"] in ("spread", "shots")
    # one shot: its own uncertainty is the interval
    assert (rows[2]["upper_n"], rows[2]["upper_ci_from"]) == ("1", "shots")
    with pytest.raises(SystemExit) as usage:  # bad usage: exit 2
        main(["conditions", str(session_path), "--by", "seam_deg,notes"])
    assert usage.value.code == 2
    assert "no column 'notes'" in capsys.readouterr().err  # notes describe one shot
    assert main(["conditions", str(session_path), "--by", "seam_deg"]) == 0
    with Session.open(session_path, writable=False) as s:
        assert s.conditions_by() == ["seam_deg"]
    assert main(["table", str(session_path), "--by", "-o", str(out)]) == 0
    assert "3 condition(s) by seam_deg" in capsys.readouterr().out


def test_bad_grouping_is_one_line_and_exit_codes_follow_the_other_commands(
        session_path, tmp_path, capsys):
    out = tmp_path / "by.csv"
    for argv in (["--by", "colour"], ["--ensemble"], ["--by", ","]):
        with pytest.raises(SystemExit) as usage:  # bad usage: exit 2
            main(["table", str(session_path), *argv, "-o", str(out)])
        assert usage.value.code == 2
        err = capsys.readouterr().err.strip().splitlines()[-1]
        assert err.startswith("wakeline table: error: argument --")
        if "colour" in argv:
            assert "--by: no column 'colour' with values in s.h5" in err
    assert not out.exists()


def test_the_reynolds_range_is_written_with_one_power_of_ten():
    from app.review.conditions import reynolds_text

    assert reynolds_text((1.39e5, 1.44e5)) == "1.39-1.44 × 10⁵"  # superscript, no caret
    assert reynolds_text((1.7e5, 1.7e5)) == "1.70 × 10⁵"
    assert reynolds_text((1.2e6, 1.3e6)) == "1.20-1.30 × 10⁶"


def test_conditions_at_the_same_seam_angle_are_drawn_side_by_side_and_named():
    # a red and a white ball at seam 20 once sat on one spot of the sheet's plot
    from app.review.conditions import plot_points
    from core.conditions import Condition

    def condition(surface, seam, upper):
        return Condition({"surface": surface, "seam_deg": seam}, ["x"], ["x"],
                         sides={"upper": Spread.of([upper, upper + 1.0]), "lower": Spread()})

    conditions = [condition("red", "10", -8.0), condition("red", "20", -7.0),
                  condition("white", "20", -6.0)]
    axis, points = plot_points(conditions)
    assert axis == "seam_deg" and [p.x for p in points] == [10.0, 20.0, 20.0]
    assert [(p.place, p.tag) for p in points] == [((0, 1), ""), ((0, 2), "red"),
                                                  ((1, 2), "white")]


def test_an_ensemble_far_from_its_shots_mean_is_said_to_be():
    # the ensemble once stood at -12.4 +- 3.6 deg beside shots at -8.2 +- 0.6 deg unremarked
    from types import SimpleNamespace

    from app.cli.conditions import condition_lines
    from app.review.conditions import (
        compact_ensemble_text,
        ensemble_cell_text,
        ensemble_disagreement,
        ensemble_lines,
    )
    from core.conditions import Condition
    from core.results import SeparationResult, SideProposal

    condition = Condition({"seam_deg": "10"}, ["a", "b", "c"], ["a", "b", "c"],
                          sides={"upper": Spread.of([-8.0, -8.2, -8.4]),
                                 "lower": Spread.of([5.0, 6.0, 7.0])})
    view = SimpleNamespace(separation=SeparationResult(SideProposal(
        -12.4, 3.6, 0.5, budget={"fit": 0.9, "distance to the launches' mean": 2.1, "launches": 0.3}),
                                                       SideProposal(7.0, 3.0, 0.5)),
                           shot_ids=["a", "b", "c"], left_out={})
    # upper: 4.2 deg from the shots' mean, whose interval is t(0.975, 2) 0.2 / sqrt(3) = 0.50
    # (Student's t table); lower: 1 deg from a mean known to 2.48 deg
    said = ensemble_disagreement(condition, view)
    assert said == [("upper: the ensemble (-12.4°) lies outside the shots' interval (-8.2° "
                     "± 0.5°): look at both")]
    assert ensemble_cell_text(condition, view) == (
        "U -12.4° ± 3.6°, L +7.0° ± 3.0° (outside the shots' interval: U)")
    # the printed table marks it with a dagger (its note says what the dagger means)
    assert compact_ensemble_text(view, ensemble_outside(condition, view)) == (
        "U -12.4° ± 3.6°†, L +7.0° ± 3.0°")
    # and the table's CSV says it in its ensemble note
    from core.conditions import condition_table

    header, [row] = condition_table([condition], ["seam_deg"], {condition.label: view})
    assert row[header.index("ensemble_note")] == "upper: outside the shots' interval"
    lines = ensemble_lines(condition, view)
    assert said[0] in lines
    assert lines[0].startswith("upper: ensemble -12.4° ± 3.6° (largest term: distance to the launches' mean);")
    assert f"  check {said[0]}" in condition_lines(condition, view)



def test_a_grouping_that_leaves_every_condition_one_shot_is_noted():
    # a nominal speed typed per launch (30.2, 29.8, ...) splits every repeat into its own row
    from types import SimpleNamespace

    from app.cli.conditions import split_note

    def conditions(*sizes):
        return [SimpleNamespace(shot_ids=[f"s{i}{k}" for k in range(n)])
                for i, n in enumerate(sizes)]

    by = ["seam_deg", "speed_nominal_m_s"]
    assert split_note(conditions(1, 1, 1, 1, 2), by) == (
        "note: 4 of 5 conditions hold one shot: grouped by seam_deg, speed_nominal_m_s, the "
        "repeats fall apart; group by fewer columns with --by (e.g. --by seam_deg)")
    assert split_note(conditions(1, 1, 2, 2), by) == ""  # repeats kept together mostly
    assert split_note(conditions(1, 1), by) == ""  # two conditions: too few to say
    assert split_note(conditions(1, 1, 1), ["seam_deg"]) == ""  # one column: nothing fewer
