"""The ball and the flight as the analyst sets them: kept with the pick (format 2), taken by
processing instead of the found ones, measured again on the stored main field; checks that flag
an implausible ball or flight; the wake state of the final angles."""

from __future__ import annotations

import json
import math
import shutil
from dataclasses import replace
from pathlib import Path

import h5py
import pytest
from data.session_helpers import fake_result, write_shot_folder

from core import WakelineError
from core.plausibility import flight_checks, usual_direction
from core.results import BallFit, Flight, SeparationResult, SideProposal
from core.shot import BY_ANALYST, ShotSettings, hand_ball
from core.store import FORMAT_VERSION, Pick, Session, ShotRecord, import_folder
from core.summary import ShotSummary

V1_FILE = Path(__file__).resolve().parent / "data" / "session_v1.h5"
CIRCLE_A = (120.5, 96.0, 30.0)
CIRCLE_B = (114.5, 96.0, 30.0)


@pytest.fixture
def session_path(tmp_path):
    import_folder(write_shot_folder(tmp_path / "src", 2), tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        s.save_result("S0", fake_result(s.settings_for("S0"), 6.0, -2.0))
    return tmp_path / "s.h5"


def test_the_analysts_ball_and_flight_are_kept_with_the_pick_and_enter_the_settings(
        session_path):
    with Session.open(session_path) as s:
        plain = s.settings_for("S0").fingerprint()
        assert not s.needs_processing("S0")
        s.set_picks({"S0": {"circle_a_px": CIRCLE_A, "circle_b_px": list(CIRCLE_B),
                            "flight_deg": 181.5}}, who="ann")
        settings = s.settings_for("S0")
        assert (settings.circle_a_px, settings.flight_deg) == (CIRCLE_A, 181.5)
        assert s.needs_processing("S0")  # measured with the found ball: not up to date
        assert s["S0"].pick.status == "to review"  # a correction decides nothing
    with Session.open(session_path, writable=False) as s:  # through the compaction on close
        pick = s["S0"].pick
        assert (pick.circle_a_px, pick.circle_b_px, pick.flight_deg) == (CIRCLE_A, CIRCLE_B,
                                                                          181.5)
        assert s.history("S0")[-1].circle_b_px == CIRCLE_B and pick.who == "ann"
    with h5py.File(session_path, "r") as f:
        assert f.attrs["format_version"] == FORMAT_VERSION == 2
        assert json.loads(f["shots/S0/pick"].attrs["circle_a_px"]) == list(CIRCLE_A)
    # a shot the analyst did not correct keeps the fingerprint it had before circles existed
    assert "circle" not in plain


@pytest.mark.parametrize(("changes", "message"), [
    ({"circle_a_px": (1.0, 2.0)}, "not a circle"),
    ({"circle_b_px": (1.0, 2.0, -3.0)}, "radius above 0"),
    ({"circle_a_px": (1.0, math.nan, 3.0)}, "not a circle"),
    ({"flight_deg": math.inf}, "finite angle"),
])
def test_a_bad_circle_or_flight_is_refused_in_one_line(session_path, changes, message):
    with Session.open(session_path) as s, pytest.raises(WakelineError, match=message):
        s.set_picks({"S0": changes})


def test_the_committed_format_1_file_opens_without_the_analysts_ball(tmp_path):
    path = tmp_path / "old.h5"
    shutil.copyfile(V1_FILE, path)
    with Session.open(path) as s:
        assert not s["R1"].pick.has_geometry()
        s.set_picks({"R1": {"flight_deg": 90.0}})
    with Session.open(path, writable=False) as s:
        assert s["R1"].pick.flight_deg == 90.0 and s["R1"].pick.status == "adjusted"


def test_processing_takes_the_analysts_circles_instead_of_finding_the_ball():
    # the circles given are used as they are: a hand-placed BallFit, no search (derived)
    from conftest import synthetic_frames

    from core.shot import _balls

    frame_a, _frame_b, truth = synthetic_frames(0)
    settings = ShotSettings(circle_a_px=CIRCLE_A, circle_b_px=CIRCLE_B)
    ball_a, ball_b = _balls(frame_a, _frame_b, settings)
    assert (ball_a.center_px, ball_a.radius_px, ball_b.center_px) == (CIRCLE_A[:2], 30.0,
                                                                       CIRCLE_B[:2])
    assert ball_a.outline == BY_ANALYST and ball_a.radius_sigma_px > 0
    assert hand_ball((10.0, 50.0, 30.0), frame_a.shape).cut_by_edge
    found, _ = _balls(frame_a, _frame_b, replace(settings, circle_a_px=None))
    assert found.outline != BY_ANALYST  # the other frame's circle is still found
    assert math.hypot(found.center_px[0] - truth.center_a_px[0],
                      found.center_px[1] - truth.center_a_px[1]) < 1.0


def test_measuring_again_keeps_the_stored_main_field_unless_other_settings_changed():
    from conftest import analytic_result, synthetic_frames

    from core import shot as shot_module

    frame_a, frame_b, truth = synthetic_frames(0)
    settings = ShotSettings(dt_s=truth.dt_s, scale_mm_per_px=truth.scale_mm_per_px,
                            ball_diameter_mm=truth.ball_diameter_mm)
    stored = analytic_result(truth, settings)
    moved = replace(settings, circle_a_px=(*truth.center_a_px, truth.radius_px + 1.0),
                    circle_b_px=(*truth.center_b_px, truth.radius_px + 1.0), flight_deg=179.0)
    again = shot_module.remeasure_ball(frame_a, frame_b, stored, moved)
    assert again.field.dx_px is stored.field.dx_px  # the main correlation is not run again
    assert again.ball_a.radius_px == truth.radius_px + 1.0 and again.flight.direction_deg == 179.0
    assert again.settings.fingerprint() != stored.settings.fingerprint()
    assert settings.measured_alike(moved)
    assert not settings.measured_alike(replace(moved, scale_mm_per_px=0.1))


def _summary(speed=30.0, direction=180.0, displacement=(-8.0, 0.0), radii=(56.0, 56.1),
             deflection=4.0, warnings=()) -> ShotSummary:
    return ShotSummary(
        separation=SeparationResult(SideProposal(-9.0, 4.0), SideProposal(2.0, 4.0), deflection),
        ball_a=BallFit((160.0, 240.0), radii[0]), ball_b=BallFit((152.0, 240.0), radii[1]),
        flight=Flight(direction, speed, displacement), warnings=tuple(warnings))


def test_an_implausible_ball_or_flight_is_flagged():
    assert flight_checks(_summary(), {"speed_nominal_m_s": 30.0}, 180.0) == []
    # the demo's sparse shot as first measured: 109.6 deg at 44 m/s, nominal 30, the wake
    # plainly along the session's flight axis (so 70 deg off this one's)
    wrong = flight_checks(_summary(speed=44.0, direction=109.6, displacement=(2.7, -7.5),
                                   deflection=-70.0), {"speed_nominal_m_s": 30.0}, 180.0)
    assert any("47 % above the launcher's nominal 30 m/s" in line for line in wrong)
    assert any("70° from the 180.0° most shots of the session fly in" in line for line in wrong)
    assert any("the wake leaves -70° off the flight axis" in line for line in wrong)
    moved = flight_checks(_summary(displacement=(2.7, -7.5)), {"flight_deg": 180.0})
    assert moved and "moved toward 70.2°, 110° from the manifest's flight direction" in moved[0]
    # moving left (180 deg) against a manifest's 0: the manifest or the frames' order is wrong
    against = flight_checks(_summary(), {"flight_deg": 0.0})
    assert against == [("the ball's circles moved toward 180.0°, against the manifest's flight "
                        "direction 0°: the manifest's flight_deg is the wrong way round, or the "
                        "frames are swapped (frames_swapped); correct shots.csv and import it "
                        "again with --correct-values")]
    # flying the other way from most shots: swapped frames, or meant (stated in the manifest)
    back = flight_checks(_summary(direction=0.0, displacement=(8.0, 0.0)), {}, 180.0)
    assert back == [("flight direction 0.0° is 180° from the 180.0° most shots of the session "
                     "fly in: frames A and B swapped (frames_swapped), or launched the other "
                     "way on purpose (then give its flight_deg in shots.csv)")]
    assert flight_checks(_summary(direction=0.0, displacement=(8.0, 0.0)), {"flight_deg": 0.0},
                         180.0) == []
    # near vertical, where the sides change names (README, Conventions): flagged within 5 deg
    up = flight_checks(_summary(direction=88.0, displacement=(0.3, -8.0)))
    assert up == [("flight direction 88.0° is 3.0° from 91°, where upper and lower change "
                   "places (upper: toward the top of the picture, toward its left within 1° of "
                   "vertical): a shot flying on the other side of it names the two sides the "
                   "other way round")]
    assert flight_checks(_summary(direction=84.0, displacement=(0.8, -8.0))) == []
    assert "from 271°" in flight_checks(_summary(direction=275.0, displacement=(0.7, 8.0)))[0]
    radii = flight_checks(_summary(radii=(56.0, 60.0)))
    assert radii == [("the ball's circles in frames A and B differ in radius (56.0 vs 60.0 px): "
                     "one of them is off")]
    said = "the ball's radius differs between the frames (56.00 vs 60.00 px, ...)"
    assert flight_checks(_summary(radii=(56.0, 60.0), warnings=[said])) == []


def test_what_the_ball_finder_warned_of_leads_the_checks():
    # a circle poorly fitted in frame A gives the two frames' radii apart: the ball finder's
    # own words (with uncertainties) come first, the measurement's other notes stay apart
    from conftest import synthetic_frames

    from core.shot import measure_shot

    frame_a, frame_b, truth = synthetic_frames(0)
    settings = ShotSettings(dt_s=truth.dt_s, scale_mm_per_px=truth.scale_mm_per_px,
                            ball_diameter_mm=truth.ball_diameter_mm,
                            circle_a_px=(*truth.center_a_px, truth.radius_px * 1.06))
    settings.piv = replace(settings.piv, workers=1)
    result = measure_shot(frame_a, frame_b, settings)
    summary = ShotSummary.from_dict(result.summary())
    assert summary.ball_warnings and set(summary.ball_warnings) <= set(summary.warnings)
    checks = flight_checks(summary)
    assert checks[: len(summary.ball_warnings)] == list(summary.ball_warnings)
    assert any("the ball's radius differs between the frames" in w for w in checks)
    again = type(result).from_stored(result.summary(), result.arrays())
    assert again.ball_warnings == result.ball_warnings


def test_the_usual_direction_needs_a_majority():
    assert usual_direction([179.0, 181.0, 180.0, 110.0]) == pytest.approx(180.0)
    assert usual_direction([359.0, 1.0, 0.5]) == pytest.approx(0.1667, abs=1e-3)
    assert usual_direction([0.0, 90.0, 180.0, 270.0]) is None
    assert usual_direction([180.0, 180.0]) is None  # too few shots to say


@pytest.mark.parametrize(("pick", "state"), [
    # the proposals, -9 and +2 deg +- 4: 11 deg apart, beyond max(5, 5.7): README, Wake
    (Pick(), "lower side holds on longer"),
    (Pick(status="accepted"), "lower side holds on longer"),
    (Pick(status="adjusted", lower_deg=-8.0), "no clear difference"),
    (Pick(status="adjusted", upper_deg=8.0), "upper side holds on longer"),
    (Pick(status="unusable", reason="x"), ""),
])
def test_the_wake_state_is_that_of_the_final_angles(pick, state):
    record = ShotRecord("t", {}, state="processed", summary=_summary(), pick=pick)
    assert record.wake_state() == state
    if state:
        assert record.wake_state({"upper": -3.0}) == "no clear difference"  # a mark being dragged
    assert ShotRecord("t", {}).wake_state() == ""  # not measured
