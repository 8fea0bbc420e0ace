"""The HDF5 study file: one writer that appends committed trials, readers that never block it.

Layout for readers without elopt: ``optimizer/store/STUDY_FILE.md``. Modules by job:
:mod:`.layout` (names, dtypes, header), :mod:`.model` (records in memory), :mod:`.lock` (one
writer), :mod:`.writer`, :mod:`.reader`, :mod:`.validate` (the rules a reader checks),
:mod:`.compat_v1` (format_version 1 read as 2), :mod:`.salvage` (recover committed trials).
"""

from elopt.optimizer.store.layout import (
    FORMAT_NAME,
    FORMAT_VERSION,
    SESSION_FIELDS,
    STATES,
    SURFACE_FIELDS,
    SURFACE_KIND_CODES,
    StudyHeader,
)
from elopt.optimizer.store.lock import WriterLock
from elopt.optimizer.store.model import StudySnapshot, TrialArrays, TrialRecord
from elopt.optimizer.store.reader import (
    check_is_study,
    read_design,
    read_study,
    read_trial_arrays,
    validate_file,
)
from elopt.optimizer.store.salvage import SalvageReport, salvage, salvage_to, upgrade
from elopt.optimizer.store.writer import StudyWriter

__all__ = [
    "FORMAT_NAME",
    "FORMAT_VERSION",
    "SESSION_FIELDS",
    "STATES",
    "SURFACE_FIELDS",
    "SURFACE_KIND_CODES",
    "SalvageReport",
    "StudyHeader",
    "StudySnapshot",
    "StudyWriter",
    "TrialArrays",
    "TrialRecord",
    "WriterLock",
    "check_is_study",
    "read_design",
    "read_study",
    "read_trial_arrays",
    "salvage",
    "salvage_to",
    "upgrade",
    "validate_file",
]
