"""One writer per study: an exclusive ``flock`` on ``<study>.lock``, dropped by the OS when the
holder dies. HDF5's own lock is not used: it would make readers fail while a writer runs."""

from __future__ import annotations

import datetime as _dt
import fcntl
import os
import socket
from pathlib import Path

from elopt.optimizer.errors import StudyFileError


class WriterLock:
    """Exclusive ``flock`` on ``<study>.lock``; the OS drops it when the holder dies."""

    def __init__(self, study_path: Path) -> None:
        self.path = Path(str(study_path) + ".lock")
        self._fd: int | None = None

    def acquire(self, study_path: Path) -> None:
        while True:
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                holder = _read_fd_text(fd)
                os.close(fd)
                raise StudyFileError(
                    f"{study_path}: another elopt process is writing this study ({holder}); "
                    "one writer at a time — wait for it to end (read it meanwhile with "
                    f"`elopt front {study_path}`)"
                ) from None
            # A holder that removed the lock file between our open and flock leaves us a lock
            # on an unlinked inode: only a lock on the inode the path names counts.
            try:
                same = os.fstat(fd).st_ino == os.stat(self.path).st_ino
            except FileNotFoundError:
                same = False
            if same:
                break
            os.close(fd)
        started = _dt.datetime.now().astimezone().isoformat(timespec="seconds")
        os.ftruncate(fd, 0)
        os.write(fd, f"pid {os.getpid()} on {socket.gethostname()} since {started}\n".encode())
        self._fd = fd

    def release(self) -> None:
        if self._fd is None:
            return
        try:
            os.unlink(self.path)
        except FileNotFoundError:
            pass
        os.close(self._fd)
        self._fd = None


def _read_fd_text(fd: int) -> str:
    try:
        os.lseek(fd, 0, os.SEEK_SET)
        text = os.read(fd, 300).decode("utf-8", "replace").strip()
    except OSError:
        text = ""
    return text or "holder unknown"
