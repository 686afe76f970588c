"""File helpers of the store: the one atomic write, fsync, strict JSON, checksums, timestamps."""

from __future__ import annotations

import contextlib
import csv
import errno
import hashlib
import io
import json
import os
import shutil
import stat
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path

from core import WakelineError
from core.results import json_ready


def now_utc() -> str:
    """The time now, ISO 8601 UTC to the second with a ``Z``."""
    return datetime.now(UTC).isoformat(timespec="seconds").replace("+00:00", "Z")


def fsync_dir(path: Path) -> None:
    """Make a rename or unlink in ``path`` durable (no-op where directories cannot be opened)."""
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def fsync_file(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def share_like(path: Path, model: Path) -> None:
    """Give ``path`` the permissions and group of ``model`` (and its owner where allowed): a
    session in a shared group folder stays one the group can edit after a save, and so do its
    journal and pending files. A folder gets search permission where it can be read."""
    info = model.stat()
    mode = stat.S_IMODE(info.st_mode)
    if path.is_dir():
        mode |= (mode & 0o444) >> 2
    with contextlib.suppress(OSError):
        os.chmod(path, mode)
    try:
        os.chown(path, info.st_uid, info.st_gid)  # allowed to root only
    except OSError:
        with contextlib.suppress(OSError):  # a group the user belongs to
            os.chown(path, -1, info.st_gid)


@contextmanager
def atomic_write(path, suffix: str = ".tmp", like: Path | None = None) -> Iterator[Path]:
    """Write a file whole or not at all: yields a temporary path beside ``path`` to write to;
    on leaving the block the file is fsynced and renamed over ``path`` and the rename made
    durable. The new file keeps the mode and group of the one it replaces (or of ``like``).
    On an exception the temporary file is removed and ``path`` is left as it was. A link is
    followed: the file it names is replaced, and the link stays.
    """
    path = Path(path)
    if path.is_symlink():
        path = path.resolve()
    tmp = path.with_name(path.name + suffix)
    tmp.unlink(missing_ok=True)
    try:
        yield tmp
        model = path if path.exists() else like
        if model is not None and model.exists():
            share_like(tmp, model)
        fsync_file(tmp)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    fsync_dir(path.parent)


def on_read_only_file_system(path: Path) -> bool:
    """``path`` (a file or folder) lies on a file system mounted read-only (False where it
    cannot be told)."""
    try:
        return bool(os.statvfs(path).f_flag & os.ST_RDONLY)
    except (AttributeError, OSError):
        return False


def same_place(path: Path, other: Path) -> bool:
    """``path`` names ``other`` (through any link, relative path or hard link) or lies in it."""
    real, real_other = Path(path).resolve(), Path(other).resolve()
    if real == real_other or real.is_relative_to(real_other):
        return True
    try:
        return os.path.samefile(path, other)
    except OSError:
        return False


def write_all(fd: int, data: bytes) -> None:
    """Write all of ``data`` to an open file descriptor (``os.write`` may write less)."""
    view = memoryview(data)
    while view:
        view = view[os.write(fd, view):]


def write_whole(path: Path, data: bytes) -> None:
    """Write ``data`` as a new file ``path`` (through ``write_all``)."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o666)
    try:
        write_all(fd, data)
    except OSError as exc:
        raise OSError(exc.errno, exc.strerror, str(path)) from None
    finally:
        os.close(fd)


def reserve_space(path: Path, size: int) -> None:
    """Make room on disk for ``path`` to grow to ``size`` bytes before HDF5 writes into it.

    HDF5 is left in a broken state when one of its writes fails (a full disk crashed the
    process at exit), so the room is taken first with ``posix_fallocate``, where a full disk
    is a plain ``OSError`` naming the file. Where the file system cannot reserve (or the
    platform has no ``posix_fallocate``), the free space is checked instead.
    """
    fd = os.open(path, os.O_RDWR)
    try:
        os.posix_fallocate(fd, 0, size)
    except (AttributeError, OSError) as exc:
        if isinstance(exc, OSError) and exc.errno not in (errno.EOPNOTSUPP, errno.EINVAL):
            raise OSError(exc.errno, exc.strerror, str(path)) from None
        needed = size - os.fstat(fd).st_size
        if shutil.disk_usage(path.parent).free < needed:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path)) from None
    finally:
        os.close(fd)


def dumps(value) -> str:
    """Strict JSON text of ``value`` (see :func:`json_ready`), UTF-8 characters kept."""
    return json.dumps(json_ready(value), allow_nan=False, ensure_ascii=False)


def sha256_of(path: Path) -> str:
    """SHA-256 hex digest of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def read_csv_table(path: Path, what: str) -> tuple[list[str], Iterator[list[str]]]:
    """The header (names stripped) and the row reader of a UTF-8 CSV file (a byte-order mark
    allowed); one line naming the file when it is missing, a folder or not UTF-8 text.
    ``what`` names the kind of file in those lines ("manifest", "review table")."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise WakelineError(f"{path}: {what} not found") from None
    except IsADirectoryError:
        raise WakelineError(f"{path}: is a folder, not a {what}") from None
    except UnicodeDecodeError:
        raise WakelineError(f"{path}: not UTF-8 text") from None
    if not text.strip():
        raise WakelineError(f"{path}: {what} is empty")
    reader = CsvRows(path, text)
    return [h.strip() for h in next(iter(reader), [])], reader


class CsvRows:
    """A CSV file's rows (``csv.reader``, strict: a quote opened and never closed is an error,
    not a cell that swallows every row after it), with ``line_num`` as the reader has it; a
    malformed row raises one line naming the file and where the row starts."""

    def __init__(self, path: Path, text: str):
        self.path = path
        self._reader = csv.reader(io.StringIO(text, newline=""), strict=True)

    @property
    def line_num(self) -> int:
        return self._reader.line_num

    def __iter__(self) -> Iterator[list[str]]:
        return self

    def __next__(self) -> list[str]:
        start = self._reader.line_num + 1
        try:
            return next(self._reader)
        except csv.Error as exc:
            why = ("a quote opened there is never closed" if "end of data" in str(exc)
                   else "a quoted cell goes on after its closing quote (a comma belongs "
                   "there)" if "expected after" in str(exc) else str(exc))
            raise WakelineError(f"{self.path} line {start}: {why}") from None


#: How alike (difflib's ratio) a CSV column's name must be to one wakeline reads to be pointed
#: out as a likely misspelling of it (``seam_angle`` for ``seam_deg`` is 0.67).
NEAR_MISS = 0.6


def near_miss_hint(wanted: list[str], names: list[str]) -> str:
    """`` (is 'ball_diamter_mm' meant?)`` for those of ``names`` that nearly spell a wanted
    column, or ""."""
    import difflib

    close = [name for column in wanted
             for name in difflib.get_close_matches(column, names, n=1, cutoff=NEAR_MISS)]
    return f" (is {' or '.join(repr(c) for c in close)} meant?)" if close else ""


#: Why a file cannot be written, in plain words, by error number.
WRITE_FAILURES = {
    errno.EROFS: "read-only file system",
    errno.EACCES: "no permission to write in this folder",
    errno.EPERM: "no permission to write in this folder",
    errno.ENOSPC: "the disk is full",
    errno.EDQUOT: "over the disk quota",
    errno.ENOENT: "the folder does not exist",
}


@contextmanager
def writing(out: Path) -> Iterator[None]:
    """Tell a failure to write the output file ``out`` (or the temporary file beside it the
    write goes through) as "OUT: cannot write here (cause)"; other failures pass unchanged."""
    try:
        yield
    except OSError as exc:
        # a write to an open file names none: a full disk there is the output's
        unnamed_full = exc.filename is None and exc.errno in (errno.ENOSPC, errno.EDQUOT)
        if not unnamed_full and (exc.filename is None
                                 or not _is_output(Path(exc.filename), Path(out))):
            raise
        raise WakelineError(f"{out}: cannot write here ({failure_cause(exc)})") from None


def failure_cause(exc: OSError) -> str:
    """Why a write failed, in plain words ("read-only file system")."""
    if exc.errno == errno.ENOENT and exc.filename and Path(exc.filename).parent.is_dir():
        return "this folder takes no new files"  # a system folder such as /proc
    return WRITE_FAILURES.get(exc.errno) or exc.strerror or str(exc)


def _is_output(path: Path, out: Path) -> bool:
    """``path`` is ``out`` or a temporary sibling of it (``out.csv.tmp``, ``out.pdf.part``)."""
    return path.parent == out.parent and path.name.startswith(out.name)
