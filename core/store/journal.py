"""``S.h5.journal``: every change since the snapshot, one JSON line each, fsynced before the
call that made it returns; a torn last line (a kill mid-write) is ignored.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from core import WakelineError
from core.store.files import atomic_write, dumps, fsync_dir, share_like, write_all


class JournalDamaged(WakelineError):
    """A journal line that cannot come from a kill: the session is not opened as it stands
    (``Session.open(..., up_to_damage=True)`` shows it read-only without that line and those
    after it). ``number``, ``why``: the line and what is wrong with it; ``entries``, ``good``:
    the entries before it and their length in bytes."""


class Journal:
    """Append-only JSON lines, one per change, each fsynced before ``append`` returns."""

    def __init__(self, path: Path, like: Path):
        self.path = path
        self.like = like  # the session file, whose mode and group a new journal takes
        self._fd: int | None = None

    def read(self) -> tuple[list[tuple[int, dict]], int]:
        """``(line number, entry)`` of the good prefix and its length in bytes (a torn tail is
        left out). A damaged line raises :class:`JournalDamaged`, which carries the entries
        before it."""
        try:
            data = self.path.read_bytes()
        except FileNotFoundError:
            return [], 0
        entries: list[tuple[int, dict]] = []
        good = 0
        *lines, tail = data.split(b"\n")
        for number, line in enumerate(lines, start=1):
            entry = _parse_line(line)
            if entry is None:
                # a kill leaves only a line without its line break (append writes the break
                # last): a whole line that cannot be read was damaged since
                raise self.damaged(number, "not a whole entry, though its line is ended",
                                   entries, good)
            entries.append((number, entry))
            good += len(line) + 1
        if tail.strip(b"\0") and not tail.startswith(b"{"):
            # nor does a kill start a line with anything but an entry's first bytes (a power
            # cut may leave zeros where the last line was being written)
            raise self.damaged(len(lines) + 1, "not the beginning of an entry", entries, good)
        return entries, good

    def damaged(self, number: int, why: str, entries=(), good: int = 0) -> JournalDamaged:
        """The one-line report of a damaged line (it cannot come from a kill), carrying the
        entries before it."""
        exc = JournalDamaged(f"{self.path}: line {number} is damaged ({why}); nothing was "
                             "changed: move the journal aside to open the session as last "
                             "saved, or open it in the window, which offers to show it "
                             f"read-only without line {number} and those after it")
        exc.number, exc.why, exc.entries, exc.good = number, why, list(entries), good
        return exc

    def truncate(self, length: int) -> None:
        if self.path.exists() and self.path.stat().st_size != length:
            with open(self.path, "r+b") as fh:
                fh.truncate(length)
                fh.flush()
                os.fsync(fh.fileno())

    def append(self, *entries: dict) -> None:
        """Add one line per entry, fsynced once: all of them are on disk when this returns."""
        line = "".join(dumps(entry) + "\n" for entry in entries).encode("utf-8")
        if self._fd is None:
            created = not self.path.exists()
            self._fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
            if created:
                share_like(self.path, self.like)
                fsync_dir(self.path.parent)
        start = os.lseek(self._fd, 0, os.SEEK_END)
        try:
            write_all(self._fd, line)
            os.fsync(self._fd)
        except OSError as exc:
            # e.g. disk full: drop the partial line so the next append starts a clean line
            os.ftruncate(self._fd, start)
            raise OSError(exc.errno, exc.strerror, str(self.path)) from None

    def rewrite(self, entries: list[dict]) -> None:
        """Replace the journal by ``entries``, whole or not at all."""
        self.close()
        with atomic_write(self.path) as tmp, open(tmp, "w", encoding="utf-8") as fh:
            fh.writelines(dumps(e) + "\n" for e in entries)

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None

    def remove(self) -> None:
        self.close()
        self.path.unlink(missing_ok=True)
        fsync_dir(self.path.parent)


def _parse_line(line: bytes) -> dict | None:
    try:
        entry = json.loads(line.decode("utf-8"))
    except (UnicodeDecodeError, ValueError):
        return None
    if not isinstance(entry, dict) or not isinstance(entry.get("seq"), int) or "op" not in entry:
        return None
    return entry

