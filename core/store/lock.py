"""``S.h5.lock``: one process at a time has a session open for writing.

The lock file names host, pid, user and the process start time; a lock of a dead process on
this host is taken over, one of another host is respected.
"""

from __future__ import annotations

import contextlib
import errno
import getpass
import json
import os
import socket
import threading
from pathlib import Path

from core import WakelineError
from core.store.files import now_utc, write_all, write_whole


class SessionLocked(WakelineError):
    """The session cannot be opened for writing here: another process has it open for writing
    (or, ``SessionReadOnly``, its file is read-only); it can be opened read-only."""


class SessionReadOnly(SessionLocked):
    """The session file is read-only: open it read-only."""



def _process_start(pid: int) -> str | None:
    """Start time of a process (clock ticks since boot, Linux), to tell a reused pid apart."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    after_name = text.rsplit(")", 1)[-1].split()
    return after_name[19] if len(after_name) > 19 else None


def _pid_alive(pid: int, start: str | None) -> bool:
    if os.name == "nt":
        return _windows_pid_alive(pid)
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OSError:
        return False
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[-1].split()[0]
    except (OSError, IndexError):
        return True
    if state in ("Z", "X"):
        return False
    now_start = _process_start(pid)
    return start is None or now_start is None or now_start == start


def _windows_pid_alive(pid: int) -> bool:
    # os.kill(pid, 0) would terminate the process on Windows; ask for its exit code instead.
    import ctypes

    kernel32 = ctypes.windll.kernel32
    handle = kernel32.OpenProcess(0x1000, False, pid)  # PROCESS_QUERY_LIMITED_INFORMATION
    if not handle:
        return False
    try:
        code = ctypes.c_ulong()
        kernel32.GetExitCodeProcess(handle, ctypes.byref(code))
        return code.value == 259  # STILL_ACTIVE
    finally:
        kernel32.CloseHandle(handle)


class Lock:
    """``S.h5.lock``: created whole (written aside, then hard-linked into place) or not at all."""

    def __init__(self, session_path: Path):
        self.path = session_path.with_name(session_path.name + ".lock")
        self.session_path = session_path
        self.held = False

    def acquire(self) -> None:
        me = {
            "host": socket.gethostname(), "pid": os.getpid(), "user": user_name(),
            "since": now_utc(), "start": _process_start(os.getpid()),
        }
        if self.path.is_dir():  # nothing wakeline makes: not for it to remove
            raise WakelineError(f"{self.path}: a folder stands where the session's lock file "
                                "goes; move it away")
        for _ in range(5):
            try:
                created = self._try_create(me)
            except PermissionError:
                advice = ("copy the session to a folder you may write in to edit it; the "
                          "window opens it read-only, and table, sheet and conditions only "
                          "read it" if self.session_path.exists()
                          else "choose a folder you may write in")
                raise SessionReadOnly(f"{self.session_path}: its folder is not writable; "
                                      f"{advice}") from None
            except OSError as exc:  # e.g. a full disk
                if exc.errno == errno.EROFS:
                    raise SessionReadOnly(f"{self.session_path}: cannot write in its folder "
                                          "(read-only file system)") from None
                raise WakelineError(f"{self.path}: cannot write the session lock "
                                    f"({exc.strerror or exc})") from None
            if created:
                self.held = True
                return
            holder = self._read()
            if holder is not None and not self._stale(holder):
                elsewhere = holder.get("host") != socket.gethostname()
                raise SessionLocked(
                    f"{self.session_path}: open for writing by {holder.get('user', '?')} "
                    f"(pid {holder.get('pid')} on {holder.get('host')} since "
                    f"{holder.get('since')}); close it there first, or open it read-only "
                    "(the window offers to; table, sheet and conditions only read it)"
                    + (f", or delete {self.path} if that machine is gone" if elsewhere else "")
                )
            self._remove_stale(holder)
        raise SessionLocked(f"{self.path}: could not take the session lock")

    def _remove_stale(self, holder: dict | None) -> None:
        """Move the stale lock aside; if another opener replaced it meanwhile, put theirs back."""
        aside = self.path.with_name(f"{self.path.name}.stale.{os.getpid()}")
        try:
            os.replace(self.path, aside)
        except FileNotFoundError:
            return
        moved = _holder_in(aside)
        if moved != holder and moved is not None:
            try:
                os.link(aside, self.path)
            except OSError:
                pass  # a third process holds the lock now; its own check stands
        aside.unlink(missing_ok=True)

    def _try_create(self, info: dict) -> bool:
        tmp = self.path.with_name(f"{self.path.name}.{os.getpid()}.{threading.get_ident()}")
        text = json.dumps(info).encode("utf-8")
        try:
            write_whole(tmp, text)  # a full disk fails here, before the lock exists
        except OSError:
            tmp.unlink(missing_ok=True)
            raise
        try:
            os.link(tmp, self.path)
            return True
        except FileExistsError:
            return False
        except OSError:
            pass  # a file system without hard links
        finally:
            tmp.unlink(missing_ok=True)
        # A file system without hard links: created exclusively, then written.
        try:
            fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL)
        except FileExistsError:
            return False
        try:
            write_all(fd, text)
        except OSError:
            self.path.unlink(missing_ok=True)
            raise
        finally:
            os.close(fd)
        return True

    def _read(self) -> dict | None:
        return _holder_in(self.path)

    @staticmethod
    def _stale(holder: dict) -> bool:
        if holder.get("host") != socket.gethostname():
            return False  # cannot see that machine's processes
        pid = holder.get("pid")
        if not isinstance(pid, int):
            return True
        return not _pid_alive(pid, holder.get("start"))

    def release(self) -> None:
        if self.held:
            holder = self._read()
            if holder and holder.get("pid") == os.getpid() and holder.get("host") == socket.gethostname():
                # a folder made read-only meanwhile keeps the lock: it names this process,
                # so the next opener finds it stale and takes it over
                with contextlib.suppress(OSError):
                    self.path.unlink(missing_ok=True)
            self.held = False


def _holder_in(path: Path) -> dict | None:
    """The holder a lock file names; None when it names none (damaged: taken as stale)."""
    try:
        holder = json.loads(path.read_text())
    except (OSError, ValueError):
        return None
    return holder if isinstance(holder, dict) else None


def user_name() -> str:
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return ""

