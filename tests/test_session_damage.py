"""Damaged session files: hand-edited journal lines and index entries are named in one line,
stored arrays carry checksums, a damaged shot is reported alone and does not block saving the
rest, and a missing pending file costs only that shot's new arrays."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest
from data.session_helpers import fake_result, write_shot_folder

from core import WakelineError
from core.store import Session, import_folder
from core.store.files import dumps

V1_FILE = Path(__file__).resolve().parent / "data" / "session_v1.h5"


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


@pytest.mark.parametrize("last", [b"\xff not json at all\n", b"garbage without an end"],
                         ids=["whole-line", "tail"])
def test_a_damaged_last_journal_line_is_named_not_dropped(session_path, last):
    # a kill leaves only an entry's first bytes without a line break; anything else on the last
    # line was once dropped without a word (and the next writer folded the rest in)
    journal = session_path.with_name("s.h5.journal")
    good = {"seq": _last_seq(session_path) + 1, "op": "pick", "shot": "S2", "pick": PICK}
    data = (dumps(good) + "\n").encode() + last
    journal.write_bytes(data)
    for writable in (True, False):
        assert "line 2 is damaged" in _one_line_error(session_path, writable)
    assert journal.read_bytes() == data


@pytest.mark.parametrize("bad", [b"\xff not json at all\n",
                                 b'{"seq": 999999, "op": "bogus"}\n'], ids=["unreadable", "unknown-op"])
def test_a_session_with_a_damaged_line_opens_read_only_as_saved_before_it(session_path, bad):
    # "move the journal aside" was the only way in, and it threw away the good edits before
    journal = session_path.with_name("s.h5.journal")
    seq = _last_seq(session_path)
    good = [{"seq": seq + 1, "op": "pick", "shot": "S2", "pick": PICK},
            {"seq": seq + 2, "op": "pick", "shot": "S1", "pick": {**PICK, "note": "fog thin"}}]
    data = "".join(dumps(e) + "\n" for e in good).encode() + bad
    journal.write_bytes(data)
    with pytest.raises(ValueError):
        Session.open(session_path, writable=True, up_to_damage=True)
    with Session.open(session_path, writable=False, up_to_damage=True) as s:
        assert s["S2"].pick.status == "accepted" and s["S1"].pick.note == "fog thin"
        assert "line 3 is damaged" in s.damage_note
        assert s.damage_note.endswith("shown read-only without it and the lines after it: "
                                      "nothing was changed")
    assert journal.read_bytes() == data


@pytest.mark.parametrize("tail", [b'{"seq": 9, "op": "pi', b"\0" * 40], ids=["torn", "zeros"])
def test_what_a_kill_or_a_power_cut_leaves_at_the_end_is_left_out(session_path, tail):
    journal = session_path.with_name("s.h5.journal")
    good = {"seq": _last_seq(session_path) + 1, "op": "pick", "shot": "S2", "pick": PICK}
    journal.write_bytes((dumps(good) + "\n").encode() + tail)
    with Session.open(session_path, writable=False) as s:
        assert s["S2"].pick.status == "accepted"


@pytest.mark.parametrize("damage", [
    lambda index: index["shots"].append("S9"),
    lambda index: index["shots"][0].pop("shot_id"),
    lambda index: index["shots"][0].update(shot_id=""),
    lambda index: index["shots"][0].update(pick=[1]),
    lambda index: index["shots"][0].update(state="finished"),
    lambda index: index["shots"][0].update(metadata=None),
    lambda index: index.update(shots={"S0": 1}),
    lambda index: index.pop("shots"),
], ids=["text-entry", "no-id", "empty-id", "list-pick", "bad-state", "no-metadata", "dict-shots",
        "no-shots"])
def test_hand_damaged_index_is_named_in_one_line(session_path, damage):
    with h5py.File(session_path, "a") as f:
        index = json.loads(f["index"][()])
        damage(index)
        del f["index"]
        f.create_dataset("index", data=json.dumps(index), dtype=h5py.string_dtype())
    for writable in (True, False):
        message = _one_line_error(session_path, writable)
        assert str(session_path) in message and "damaged" in message


# -- checksums: a damaged stored array or text is reported, never read as other numbers --------


def _flip(path, offset: int, length: int = 16) -> None:
    data = bytearray(path.read_bytes())
    data[offset:offset + length] = bytes(b ^ 0x5A for b in data[offset:offset + length])
    path.write_bytes(bytes(data))


def _chunk_offset(path, dataset: str) -> int:
    with h5py.File(path, "r") as f:
        ds = f[dataset]
        return ds.id.get_chunk_info(0).byte_offset if ds.chunks else ds.id.get_offset()


def test_stored_arrays_and_texts_carry_checksums(session_path, tmp_path):
    src = write_shot_folder(tmp_path / "emb", 1)
    import_folder(src, tmp_path / "e.h5", embed=True)
    old = tmp_path / "old.h5"  # a file of format 1 written before checksums
    shutil.copyfile(V1_FILE, old)
    with Session.open(old, writable=False) as s:
        before = s.load_result("R1").arrays(), s.load_frames("R2")
    with Session.open(old) as s:  # its first save rewrites it whole, with checksums
        s.set_pick("R2", status="unusable", reason="no ball")
    with Session.open(old, writable=False) as s:
        for name, array in before[0].items():
            np.testing.assert_array_equal(s.load_result("R1").arrays()[name], array)
        np.testing.assert_array_equal(s.load_frames("R2")[1], before[1][1])
    for path in (session_path, tmp_path / "e.h5", old):
        with h5py.File(path, "r") as f:
            datasets = []
            f.visititems(lambda name, obj, found=datasets: found.append(obj)
                         if isinstance(obj, h5py.Dataset) else None)
            arrays = [d for d in datasets if d.dtype.kind != "O"]
            texts = [d for d in datasets if d.dtype.kind == "O"]
            assert arrays or path == session_path
            assert all(d.fletcher32 for d in arrays), [d.name for d in arrays if not d.fletcher32]
            assert texts and all("sha256" in d.attrs for d in texts)  # no Fletcher-32 on strings


def test_a_damaged_result_is_reported_for_its_shot_and_reprocessing_heals_it(session_path):
    _flip(session_path, _chunk_offset(session_path, "shots/S0/result/dx_px") + 40)
    with Session.open(session_path) as s:
        with pytest.raises(WakelineError) as info:
            s.load_result("S0")
        text = str(info.value)
        assert text.startswith("shot S0: ") and "damaged" in text and "process" in text
        assert "\n" not in text
        # it still counts as processed, so the message says how a run takes it anyway
        assert "--force --shots S0" in text and not s.needs_processing("S0")
        assert f"wakeline process {session_path} --force" in text  # pasted as it stands
        assert s.load_result("S1").field.dx_px.shape == (20, 30)  # the rest is usable
        s.set_pick("S0", status="unusable", reason="seen damaged")  # and can be saved
        s.set_pick("S2", status="accepted")
    with Session.open(session_path) as s:
        assert s["S2"].pick.status == "accepted"
        with pytest.raises(WakelineError, match="shot S0: .*damaged"):
            s.load_result("S0")
        s.save_result("S0", fake_result(s.settings_for("S0"), 9.0, shape=(20, 30)))
    with Session.open(session_path, writable=False) as s:
        assert s.load_result("S0").separation.upper.angle_deg == 9.0
        assert s["S0"].pick.reason == "seen damaged"


def test_damaged_embedded_frames_are_reported_for_their_shot(tmp_path):
    from core.store import read_frames

    import_folder(write_shot_folder(tmp_path / "src", 2), tmp_path / "e.h5", embed=True)
    path = tmp_path / "e.h5"
    _flip(path, _chunk_offset(path, "shots/S1/frames/a") + 8)
    with Session.open(path, writable=False) as s:
        assert s.load_frames("S0")[0].shape == (192, 256)
        with pytest.raises(WakelineError, match="^shot S1: frames stored in .*e.h5 are damaged"):
            s.load_frames("S1")
        with pytest.raises(WakelineError, match="^shot S1: frames stored in"):
            read_frames("S1", s.frame_source("S1"))  # as a worker reads them


def _rewrite_text_in_place(path, dataset: str, old: bytes, new: bytes) -> None:
    """Change a stored text as damage would, leaving its checksum attribute as it was."""
    with h5py.File(path, "r+") as f:
        ds = f[dataset]
        if ds.shape == ():
            ds[()] = ds[()].replace(old, new)
        else:
            ds[0] = ds[0].replace(old, new)


def test_a_damaged_history_is_reported_for_its_shot(session_path):
    with Session.open(session_path) as s:
        s.set_pick("S2", status="accepted", note="a note to find")
    _rewrite_text_in_place(session_path, "shots/S2/history", b"note to", b"note of")
    with Session.open(session_path, writable=False) as s:
        assert len(s.history("S1")) == 1
        with pytest.raises(WakelineError, match="^shot S2: edit history stored in .* is damaged"):
            s.history("S2")


def test_a_damaged_index_is_reported(session_path):
    _rewrite_text_in_place(session_path, "index", b'"seam_deg": 10.0', b'"seam_deg": 16.0')
    with pytest.raises(WakelineError, match=r"s\.h5: damaged.* session file \(.*checksum"):
        Session.open(session_path, writable=False)


def _everything(path) -> dict:
    with Session.open(path, writable=False) as s:
        out = {"records": [repr(r) for r in s.values()], "name": s.name,
               "settings": s.processing_settings()}
        for shot_id in s:
            result = s.load_result(shot_id)
            out[shot_id] = (repr(s.history(shot_id)), None if result is None else
                            {k: v.tobytes() for k, v in result.arrays().items()})
    return out


def test_random_overwrites_never_change_what_is_read_silently(session_path, tmp_path):
    """The adversarial check: 256 random bytes written at a random place of a
    closed session either change nothing that is read or give a one-line error."""
    import random

    expected = _everything(session_path)
    rng = random.Random(12)
    size = session_path.stat().st_size
    outcomes = {"same": 0, "error": 0}
    for round_ in range(40):
        copy = tmp_path / f"hit{round_}.h5"
        data = bytearray(session_path.read_bytes())
        start = rng.randrange(0, size - 256)
        data[start:start + 256] = rng.randbytes(256)
        copy.write_bytes(bytes(data))
        try:
            seen = _everything(copy)
        except WakelineError as exc:
            assert "\n" not in str(exc)
            outcomes["error"] += 1
            continue
        assert seen == expected, f"bytes {start}..{start + 256} changed what is read silently"
        outcomes["same"] += 1
    assert outcomes["error"] > 10, outcomes


# -- a damaged shot or a lost pending file blocks nothing else ------------------------------


def _damage_header(path, name: str) -> None:
    """Damage the object header of one HDF5 object (its checksum no longer matches)."""
    with h5py.File(path, "r") as f:
        address = h5py.h5o.get_info(f[name].id).addr
    _flip(path, address + 12, 8)


def _as_if_killed(s: Session) -> None:
    s._journal.close()
    s._lock.release()


@pytest.mark.parametrize("whole", [False, True], ids=["patched", "rewritten whole"])
@pytest.mark.parametrize("damaged", ["shots/S1/result/dx_px", "shots/S1/result", "shots/S1"])
def test_a_damaged_shot_group_does_not_block_saving_the_others(session_path, whole, damaged):
    _damage_header(session_path, damaged)
    journal = session_path.with_name("s.h5.journal")
    with Session.open(session_path) as s:
        s.set_pick("S1", status="unusable", reason="seen damaged")  # touches the damaged shot
        s.set_pick("S2", status="accepted")
        if whole:
            s._unused_bytes = 10 * session_path.stat().st_size  # force a whole rewrite
        s.compact()
        assert s.problems and all(p.startswith("shot S1: ") for p in s.problems)
        assert "process the shot again" in s.problems[-1]
    assert not journal.exists()
    with Session.open(session_path) as s:
        assert s["S2"].pick.status == "accepted" and s["S1"].pick.reason == "seen damaged"
        kept = ["unusable"] if damaged == "shots/S1" else ["accepted", "unusable"]
        assert [p.status for p in s.history("S1")] == kept  # what was readable
        assert s.load_result("S0").field.dx_px.shape == (20, 30)
        assert s["S1"].state == "failed" and "process the shot again" in s["S1"].failure
        assert s.load_result("S1") is None and s.needs_processing("S1")
        s.save_result("S1", fake_result(s.settings_for("S1"), 4.0, shape=(20, 30)))  # heals it
        s.set_pick("S0", status="accepted")
    with Session.open(session_path, writable=False) as s:
        assert s.load_result("S1").separation.upper.angle_deg == 4.0
        assert s["S0"].pick.status == "accepted"
    assert not journal.exists()


def test_a_lost_pending_file_costs_only_that_result(session_path):
    s = Session.open(session_path)
    s.save_result("S0", fake_result(s.settings_for("S0"), 8.0, shape=(20, 30)))
    s.set_pick("S0", status="accepted")
    s.set_pick("S2", status="accepted")
    _as_if_killed(s)
    pending = session_path.with_name("s.h5.pending")
    for file in pending.iterdir():
        file.unlink()
    with Session.open(session_path) as s:
        with pytest.raises(WakelineError, match="^shot S0: .*lost.*process the shot again"):
            s.load_result("S0")
        assert s.load_result("S1") is not None
    assert not session_path.with_name("s.h5.journal").exists()
    with Session.open(session_path, writable=False) as s:
        assert s["S2"].pick.status == "accepted" and s["S0"].pick.status == "accepted"
        assert s["S0"].state == "failed" and "process the shot again" in s["S0"].failure
        assert s.load_result("S0") is None


def test_damaged_embedded_frames_are_left_out_and_the_rest_saved(tmp_path):
    import_folder(write_shot_folder(tmp_path / "src", 2), tmp_path / "e.h5", embed=True)
    path = tmp_path / "e.h5"
    _damage_header(path, "shots/S1/frames/a")
    with Session.open(path) as s:
        s.set_pick("S1", status="unusable", reason="frames damaged")
        s.set_pick("S0", status="accepted")
        s._unused_bytes = 10 * path.stat().st_size  # a whole rewrite reads every shot
    with Session.open(path) as s:
        assert s["S0"].pick.status == "accepted" and s["S1"].pick.reason == "frames damaged"
        assert s.load_frames("S0")[0].shape == (192, 256)
        with pytest.raises(WakelineError, match="^shot S1: frames stored in .* are damaged"):
            s.load_frames("S1")


def test_the_process_command_names_the_damaged_shot_and_what_to_do(session_path, capsys):
    from data.session_helpers import fast_settings

    from app.cli import main

    with Session.open(session_path) as s:
        s.set_processing_settings(fast_settings())
    _damage_header(session_path, "shots/S1/result")
    s = Session.open(session_path)
    s.set_pick("S1", status="unusable", reason="seen damaged")  # left in the journal
    _as_if_killed(s)
    code = main(["process", str(session_path), "--shots", "S2", "--workers", "0", "--quiet"])
    err = capsys.readouterr().err
    assert code == 1
    assert "shot S1: stored result lost" in err and "process the shot again" in err
    assert "Traceback" not in err
    assert not session_path.with_name("s.h5.journal").exists()
    with Session.open(session_path, writable=False) as s:
        assert s["S2"].state == "processed" and s["S1"].pick.reason == "seen damaged"


def test_the_sheet_shows_a_damaged_result_in_its_panel_and_makes_the_rest(session_path,
                                                                           tmp_path):
    # one shot's stored arrays damaged: the sheet is made, that panel names the damage and the
    # way to measure the shot again, the other processed shot keeps its field
    import os

    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    import re

    from pypdf import PdfReader

    from app.sheet import make_sheet

    _flip(session_path, _chunk_offset(session_path, "shots/S0/result/dx_px") + 40)
    out = tmp_path / "sheet.pdf"
    with Session.open(session_path, writable=False) as s:
        make_sheet(s, out, per_page=1)
    pages = [re.sub(r"\s+", " ", page.extract_text()).replace("\ufb01", "fi")  # ligature
             for page in PdfReader(str(out)).pages]
    s0 = next(page for page in pages if "Shot S0" in page)
    s1 = next(page for page in pages if "Shot S1" in page)
    assert "No field: shot S0: " in s0 and "damaged" in s0 and "process it again by force" in s0
    assert "No field" not in s1


def test_the_sheet_command_names_the_damaged_shots_on_stderr(session_path, tmp_path, capsys):
    # the sheet was made and the command said only "N page(s), M shot(s)": a damaged result
    # was seen only by whoever read that panel
    import os

    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from app.cli import main

    _flip(session_path, _chunk_offset(session_path, "shots/S0/result/dx_px") + 40)
    out = tmp_path / "sheet.pdf"
    assert main(["sheet", str(session_path), "-o", str(out)]) == 0
    captured = capsys.readouterr()
    assert out.exists() and "page(s)" in captured.out
    assert captured.err == (
        f"wakeline: stored result damaged, its panel says so: S0; measure again with "
        f"wakeline process {session_path} --force --shots S0\n")
