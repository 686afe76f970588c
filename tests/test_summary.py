"""The typed shot summary: read from the JSON the measurement writes, tolerant of keys it does
not know, versioned beside the JSON in the session store."""

from __future__ import annotations

import json
from dataclasses import replace

import h5py
import pytest
from data.session_helpers import fake_result, write_shot_folder

from core import WakelineError
from core.results import BallFit
from core.store import Session, import_folder
from core.summary import SUMMARY_VERSION, ShotSummary


@pytest.fixture
def result():
    """A result with a ball, known proposals and small arrays (nothing measured)."""
    from core.shot import ShotSettings

    return replace(fake_result(ShotSettings(dt_s=2e-5), 6.5, -2.5),
                   ball_a=BallFit((40.0, 30.0), 12.0, 0.2), ball_b=BallFit((32.0, 30.0), 12.0))


def test_summary_reads_every_record_of_the_json(result):
    summary = ShotSummary.from_dict(json.loads(json.dumps(result.summary())))
    assert summary.ball_a == result.ball_a and summary.ball_b.center_px == (32.0, 30.0)
    assert summary.flight == result.flight
    assert summary.separation == result.separation
    assert summary.proposed_deg("upper") == 6.5 and summary.uncertainty_deg("lower") == 2.0
    assert summary.vectors.count == result.field.valid.size and summary.vectors.window_px == 32
    assert summary.scale_mm_per_px == 0.08 and summary.dt_s == 2e-5
    assert summary.to_dict() == json.loads(json.dumps(result.summary()))


def test_a_stored_symmetric_wake_state_reads_as_no_clear_difference(result):
    data = json.loads(json.dumps(result.summary()))
    data["separation"]["wake_state"] = "symmetric"  # as sessions of earlier versions wrote it
    assert ShotSummary.from_dict(data).separation.wake_state == "no clear difference"


def test_unknown_keys_are_kept_and_do_not_stop_reading(result):
    data = json.loads(json.dumps(result.summary()))
    data["drag_coefficient"] = 0.4
    data["flight"]["speed_uncertainty_m_s"] = 0.3
    data["separation"]["upper"]["layer_width_px"] = 1.5
    summary = ShotSummary.from_dict(data)
    assert summary.flight.speed_m_s == 30.0 and summary.proposed_deg("upper") == 6.5
    assert summary.to_dict()["drag_coefficient"] == 0.4
    assert summary.to_dict()["separation"]["upper"]["layer_width_px"] == 1.5


def test_a_newer_summary_version_is_refused_with_a_message():
    with pytest.raises(WakelineError, match="summary version 2 is newer than this wakeline"):
        ShotSummary.from_dict({}, version=SUMMARY_VERSION + 1)


def test_the_store_keeps_the_json_as_written_and_its_version_beside_it(result, tmp_path):
    import_folder(write_shot_folder(tmp_path / "src", 1), tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        s.save_result("S0", replace(result, settings=s.settings_for("S0")))
        written = json.loads(json.dumps(s["S0"].summary.to_dict()))
    with h5py.File(tmp_path / "s.h5", "r") as f:
        stored = f["shots/S0/result"]
        assert stored.attrs["summary_version"] == SUMMARY_VERSION
        assert json.loads(stored.attrs["summary"]) == written
        entry = json.loads(f["index"][()])["shots"][0]
        assert entry["summary_version"] == SUMMARY_VERSION and entry["summary"] == written
        assert entry["pick"]["status"] == "to review" and entry["state"] == "processed"
    with Session.open(tmp_path / "s.h5", writable=False) as s:
        assert s["S0"].summary.separation == result.separation
