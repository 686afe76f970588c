"""Damaged session files: hand-edited journal lines and index entries are named in one line,
stored arrays carry checksums, a damaged shot is reported alone and does not block saving the
rest, and a missing pending file costs only that shot's new arrays."""

from __future__ import annotations

import json

import h5py
import pytest
from data.session_helpers import fake_result, write_shot_folder

from core import WakelineError
from core.store import Session, import_folder
from core.store.files import dumps


@pytest.fixture
def session_path(tmp_path):
    """A closed session of three referenced shots; S0 and S1 processed, S1 accepted."""
    import_folder(write_shot_folder(tmp_path / "src", 3), tmp_path / "s.h5")
    with Session.open(tmp_path / "s.h5") as s:
        for shot_id in ("S0", "S1"):
            s.save_result(shot_id, fake_result(s.settings_for(shot_id), shape=(20, 30)))
        s.set_pick("S1", status="accepted")
    return tmp_path / "s.h5"


def _last_seq(path) -> int:
    with h5py.File(path, "r") as f:
        return int(f.attrs["last_seq"])


def _one_line_error(path, writable: bool) -> str:
    with pytest.raises(WakelineError) as info:
        Session.open(path, writable=writable)
    text = str(info.value)
    assert "\n" not in text
    return text


PICK = {"status": "accepted", "upper_deg": None, "lower_deg": None, "reason": "", "note": "",
        "who": "x", "when": "2024-01-01T00:00:00Z"}


@pytest.mark.parametrize("line", [
    {"op": "pick", "shot": "S9", "pick": PICK},  # unknown shot
    {"op": "pick", "shot": "S0"},  # missing key
    {"op": "pick", "shot": "S0", "pick": [1, 2]},  # wrong shape
    {"op": "pick", "shot": "S0", "pick": {**PICK, "status": "done"}},  # unknown word
    {"op": "pick", "shot": ["S0"], "pick": PICK},  # unhashable shot id
    {"op": "result", "shot": "S0", "pending": "000000099.h5"},  # no summary
    {"op": "failure", "shot": "S0", "reason": "x"},  # no fingerprint
    {"op": "add_shot", "shot": "S7", "metadata": "dt_s=1", "frames": {}},
    {"op": "settings", "settings": [1]},
    {"op": "rename", "shot": "S0"},  # an op this wakeline does not know
    {"op": "add_shot", "shot": " S7", "metadata": {}, "frames": {}},  # spaces round the id
], ids=["unknown-shot", "missing-key", "list-pick", "bad-status", "list-shot", "no-summary",
        "no-fingerprint", "text-metadata", "list-settings", "unknown-op", "spaced-id"])
def test_hand_damaged_journal_lines_are_named_in_one_line(session_path, line):
    journal = session_path.with_name("s.h5.journal")
    seq = _last_seq(session_path)
    good = {"seq": seq + 1, "op": "pick", "shot": "S2", "pick": PICK}
    text = dumps(good) + "\n" + dumps({"seq": seq + 2, **line}) + "\n"
    journal.write_text(text)
    snapshot = session_path.read_bytes()
    for writable in (True, False):
        message = _one_line_error(session_path, writable)
        assert str(journal) in message and "line 2 is damaged" in message
    assert journal.read_text() == text and session_path.read_bytes() == snapshot
    assert not session_path.with_name("s.h5.lock").exists()


@pytest.mark.parametrize("damage", [
    lambda index: index["shots"].append("S9"),
    lambda index: index["shots"][0].pop("shot_id"),
    lambda index: index["shots"][0].update(shot_id=""),
    lambda index: index["shots"][0].update(pick=[1]),
    lambda index: index["shots"][0].update(state="finished"),
    lambda index: index["shots"][0].update(metadata=None),
    lambda index: index.update(shots={"S0": 1}),
    lambda index: index.pop("shots"),
], ids=["text-entry", "no-id", "empty-id", "list-pick", "bad-state", "no-metadata", "dict-shots", "no-shots"])
def test_hand_damaged_index_is_named_in_one_line(session_path, damage):
    with h5py.File(session_path, "a") as f:
        index = json.loads(f["index"][()])
        damage(index)
        del f["index"]
        f.create_dataset("index", data=json.dumps(index), dtype=h5py.string_dtype())
    for writable in (True, False):
        message = _one_line_error(session_path, writable)
        assert str(session_path) in message and "damaged" in message
