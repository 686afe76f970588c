"""The session store: shots, results and the analyst's picks of a session, kept safe on disk.

Modules: ``session`` (``Session``), ``records`` (picks, shot records, statuses), ``snapshot``
(the HDF5 file, its format version, loaders and checksums), ``journal`` and ``replay`` (the
journal on disk and applied in memory), ``companions`` (the files beside the snapshot),
``lock``, ``files`` (the one ``atomic_write``), ``frames`` (frame pairs for workers),
``manifest`` and ``importing`` (a folder of shots), ``table`` (the CSV of picks). No Qt and no
part of the PIV stack.
"""

from core.store.frames import in_exposure_order, read_frames
from core.store.importing import ImportReport, import_folder, take_corrections
from core.store.journal import JournalDamaged
from core.store.lock import SessionLocked, SessionReadOnly
from core.store.manifest import MANIFEST_NAME, read_manifest
from core.store.records import Pick, ProcessState, ReviewStatus, ShotRecord
from core.store.session import Session, UnknownShot
from core.store.snapshot import FORMAT_VERSION
from core.store.table import session_table_rows, write_table_csv

__all__ = [
    "FORMAT_VERSION",
    "MANIFEST_NAME",
    "ImportReport",
    "JournalDamaged",
    "Pick",
    "ProcessState",
    "ReviewStatus",
    "Session",
    "SessionLocked",
    "SessionReadOnly",
    "ShotRecord",
    "UnknownShot",
    "import_folder",
    "in_exposure_order",
    "read_frames",
    "read_manifest",
    "session_table_rows",
    "take_corrections",
    "write_table_csv",
]
