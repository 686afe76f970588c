"""How journal entries change a session in memory: replayed when it opens, applied as each
change is committed (a part of ``Session`` kept in its own module, as ``SnapshotWriting`` is).
"""

from __future__ import annotations

import shutil
from dataclasses import replace

from core.store.companions import companion_files
from core.store.journal import JournalDamaged
from core.store.records import Pick, ProcessState, ShotRecord, check_shot_id, damage_reason
from core.store.reviews import CONTENT_OPS
from core.store.snapshot import Place, pending_name, summary_from


class JournalReplay:
    """Uses the session's journal, records, places, sequence numbers and pending folder."""

    def _replay_journal(self, up_to_damage: bool = False) -> None:
        """Replay the journal; ``up_to_damage`` (read-only) stops at a damaged line instead of
        refusing the session, and says so in ``damage_note``."""
        try:
            numbered, good_length = self._journal.read()
        except JournalDamaged as exc:
            if not up_to_damage:
                raise
            numbered, good_length, damage = exc.entries, exc.good, exc
        else:
            damage = None
        live = [(n, e) for n, e in numbered if e["seq"] > self._snapshot_seq]
        for index, (number, entry) in enumerate(live):
            try:
                self._apply(entry)
            except (KeyError, TypeError, ValueError, AttributeError) as exc:
                damage = self._journal.damaged(number, damage_reason(exc))
                if not up_to_damage:
                    raise damage from None
                live = live[:index]  # what was applied: the session as saved up to here
                break
            self._seq = max(self._seq, entry["seq"])
        if damage is not None:
            self.damage_note = (f"{self._journal.path}: line {damage.number} is damaged "
                                f"({damage.why}); shown read-only without it and the lines "
                                "after it: nothing was changed")
        self._dirty = bool(live)
        live = [entry for _, entry in live]
        if self.read_only:
            return
        if len(live) != len(numbered):  # left from a compaction killed before it dropped them
            self._journal.rewrite(live)
        else:
            self._journal.truncate(good_length)
        self._remove_orphans({e.get("pending") for e in live} - {None})

    def _remove_orphans(self, referenced: set[str]) -> None:
        """Delete files a killed writer left behind: temporary snapshot, unreferenced arrays."""
        companion_files(self.path)["snapshot_tmp"].unlink(missing_ok=True)
        if self._pending_dir.is_dir():
            for item in self._pending_dir.iterdir():
                if item.name not in referenced:
                    item.unlink(missing_ok=True)
            if not referenced:
                shutil.rmtree(self._pending_dir, ignore_errors=True)

    def _apply(self, entry: dict) -> None:
        """Apply one journal entry in memory. A malformed entry raises KeyError, TypeError,
        ValueError or AttributeError, which replay reports as a damaged line."""
        op = entry["op"]
        if op == "settings":
            self._processing = dict(entry["settings"])
            return
        if op in CONTENT_OPS:
            self._apply_content(entry)
            return
        if op not in ("add_shot", "result", "failure", "pick", "shot_values"):
            raise ValueError(f"unknown entry {op!r}: written by a newer wakeline?")
        shot_id = entry["shot"]
        if op == "add_shot":
            check_shot_id(shot_id, ValueError)
            self._records[shot_id] = ShotRecord(shot_id, dict(entry["metadata"]),
                                                frames=dict(entry["frames"]))
            self._places[shot_id] = Place(frames=pending_name(entry.get("pending"), True))
            self._touched.add(shot_id)
            return
        if shot_id not in self._records:
            raise ValueError(f"shot {shot_id!r} is not in the session")
        self._touched.add(shot_id)
        rec, place = self._records[shot_id], self._places[shot_id]
        if op == "result":
            rec.state, rec.failure = ProcessState.PROCESSED, ""
            rec.summary = summary_from(entry["summary"], entry.get("summary_version"))
            rec.fingerprint, rec.software_version = entry["fingerprint"], entry["version"]
            rec.processed_utc = entry["t"]
            place.result = pending_name(entry["pending"])
            if entry.get("pick") is not None:  # the decision the new result changed, with it
                rec.pick = Pick.from_dict(entry["pick"])
                place.history.append(replace(rec.pick))
        elif op == "shot_values":
            rec.metadata = dict(entry["metadata"])
        elif op == "failure":
            rec.state, rec.failure = ProcessState.FAILED, entry["reason"]
            rec.fingerprint = entry["fingerprint"]
            rec.software_version, rec.processed_utc = entry["version"], entry["t"]
        else:
            rec.pick = Pick.from_dict(entry["pick"])
            place.history.append(replace(rec.pick))
