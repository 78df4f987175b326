"""One run per output folder at a time: an advisory lock on ``<output_dir>/.geoflow.lock``.

The lock is an operating-system file lock (``fcntl.flock``; ``msvcrt.locking`` on Windows) held
for the whole run, so it is released by the kernel when the process ends, however it ends: a
lock file left by a killed run holds no lock and is simply taken over (its old owner is named in
run.log). The file records the owner (host, process id, start time, run name) so that a second
run can say who holds the folder.
"""
from __future__ import annotations

import json
import os
import socket
import time
from pathlib import Path

from ..errors import RunLockedError, write_error
from .layout import LOCK_NAME

try:
    import fcntl
except ImportError:          # pragma: no cover - Windows
    fcntl = None
    import msvcrt


class FolderLock:
    """Exclusive lock of one output folder; use as a context manager or call release()."""

    def __init__(self, folder: Path, run_name: str):
        self.path = Path(folder) / LOCK_NAME
        self.run_name = run_name
        self.fd: int | None = None
        self.previous_owner: dict | None = None   # owner recorded by a run that ended without releasing

    def acquire(self) -> "FolderLock":
        for _ in range(20):
            fd = self._open_and_lock()
            if _same_file(fd, self.path):
                break
            os.close(fd)          # the holder released and removed the file between our open and lock: retry
        else:                     # pragma: no cover - needs 20 lost races in a row
            raise RunLockedError(f"{self.path.parent}: could not take the run lock {self.path}; try again")
        self.previous_owner = _read_owner(fd) or None
        record = {"host": socket.gethostname(), "pid": os.getpid(), "run": self.run_name,
                  "started": time.strftime("%Y-%m-%dT%H:%M:%S%z")}
        try:
            os.ftruncate(fd, 0)
            os.lseek(fd, 0, os.SEEK_SET)
            os.write(fd, (json.dumps(record) + "\n").encode("utf-8"))
        except OSError as exc:
            _unlock(fd)
            os.close(fd)
            raise write_error(self.path, exc) from None
        self.fd = fd
        return self

    def _open_and_lock(self) -> int:
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise write_error(self.path, exc) from None
        if not _try_lock(fd):
            owner = _read_owner(fd)
            os.close(fd)
            raise RunLockedError(f"{self.path.parent}: another geoflow run is writing to this folder ({_who(owner)}); "
                                 "wait for it to finish, or give this run another [run] output_dir")
        return fd

    def release(self) -> None:
        if self.fd is None:
            return
        try:                      # remove the file while still holding the lock (see _same_file)
            os.ftruncate(self.fd, 0)
            self.path.unlink()
        except OSError:
            pass
        _unlock(self.fd)
        os.close(self.fd)
        self.fd = None

    def __enter__(self) -> "FolderLock":
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()


def _same_file(fd: int, path: Path) -> bool:
    try:
        return os.fstat(fd).st_ino == os.stat(path).st_ino
    except OSError:
        return False


def _try_lock(fd: int) -> bool:
    try:
        if fcntl is not None:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        else:                # pragma: no cover
            msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)
        return True
    except OSError:
        return False


def _unlock(fd: int) -> None:
    try:
        if fcntl is not None:
            fcntl.flock(fd, fcntl.LOCK_UN)
        else:                # pragma: no cover
            msvcrt.locking(fd, msvcrt.LK_UNLCK, 1)
    except OSError:
        pass


def _read_owner(fd: int) -> dict:
    try:
        os.lseek(fd, 0, os.SEEK_SET)
        text = os.read(fd, 4096).decode("utf-8", "replace").strip()
        return json.loads(text) if text else {}
    except (OSError, ValueError):
        return {}


def _who(owner: dict) -> str:
    if not owner:
        return "owner unknown"
    return (f"run {owner.get('run', '?')!r}, process {owner.get('pid', '?')} on {owner.get('host', '?')}, "
            f"started {owner.get('started', '?')}")
