"""One writer at a time per plan folder: an OS-level lock on ``PLAN/.fieldplan.lock``.

The lock is an advisory ``flock`` (POSIX) or ``msvcrt.locking`` (Windows) on a
file inside the plan folder. The operating system releases it when the holder
exits, however it exits (``kill -9`` included), so a crash never leaves a plan
locked. It is held across read-modify-write: whoever holds it reads the plan,
changes it and writes it back before anyone else reads it for a change.

The lock file is opened with ``O_NOFOLLOW`` and never truncated, so a link
planted under its name cannot make fieldplan write elsewhere. After locking,
the file at the path must still be the one locked: if a run of ``fieldplan plan
--force`` replaced the folder meanwhile, the lock is taken again on the new
folder.

Within one process the lock is re-entrant per thread (a command that holds it
may call library functions that take it again); separate threads, like
separate processes, wait for each other.
"""

from __future__ import annotations

import errno
import os
import random
import stat
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from fieldplan.errors import FieldplanError, PlanDirError

__all__ = ["LOCK_NAME", "DEFAULT_TIMEOUT_S", "PlanBusyError", "plan_lock", "holds_lock"]

LOCK_NAME = ".fieldplan.lock"
#: Seconds to wait for another writer before giving up. A change of a plan
#: takes well under a second for field-sized plans and a few seconds for the
#: largest; a minute covers a queue of several. ``FIELDPLAN_LOCK_TIMEOUT`` overrides it.
DEFAULT_TIMEOUT_S = 60.0


class PlanBusyError(FieldplanError, TimeoutError):
    """Another command (or the web workspace, or a phone sync) is changing the plan folder."""


_local = threading.local()


def _held() -> dict[str, int]:
    held = getattr(_local, "held", None)
    if held is None:
        held = _local.held = {}
    return held


def _key(plan_dir: Path) -> str:
    return os.path.realpath(plan_dir)


def holds_lock(plan_dir: str | Path) -> bool:
    """Whether this thread holds the lock of ``plan_dir``."""
    return _key(Path(plan_dir)) in _held()


def _timeout(timeout: float | None) -> float:
    if timeout is not None:
        return float(timeout)
    try:
        return float(os.environ.get("FIELDPLAN_LOCK_TIMEOUT", DEFAULT_TIMEOUT_S))
    except ValueError:
        return DEFAULT_TIMEOUT_S


if os.name == "nt":  # pragma: no cover - exercised on Windows only
    import msvcrt

    def _try_lock(fd: int) -> bool:
        try:
            os.lseek(fd, 0, os.SEEK_SET)
            msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)
        except OSError:
            return False
        return True

    def _unlock(fd: int) -> None:
        os.lseek(fd, 0, os.SEEK_SET)
        msvcrt.locking(fd, msvcrt.LK_UNLCK, 1)

else:
    import fcntl

    def _try_lock(fd: int) -> bool:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            return False
        return True

    def _unlock(fd: int) -> None:
        fcntl.flock(fd, fcntl.LOCK_UN)


def _open_lock_file(folder: Path) -> int:
    path = folder / LOCK_NAME
    if path.is_symlink():  # O_NOFOLLOW does not exist everywhere; this says why in words
        raise PlanDirError(
            f"{path}: is a symbolic link; a plan folder's own files must not be links: delete it and retry"
        )
    flags = os.O_RDWR | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_CLOEXEC", 0)
    try:
        fd = os.open(path, flags, 0o666)
    except OSError as err:
        if err.errno == errno.ELOOP:
            raise PlanDirError(
                f"{path}: is a symbolic link; a plan folder's own files must not be links: delete it and retry"
            ) from None
        if err.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
            raise PlanDirError(
                f"{folder}: cannot create {LOCK_NAME} here ({err.strerror}); "
                "changing a plan needs a writable plan folder: copy it somewhere writable"
            ) from None
        raise
    if not stat.S_ISREG(os.fstat(fd).st_mode):
        os.close(fd)
        raise PlanDirError(f"{path}: is not a regular file; delete it and retry")
    return fd


def _same_file(fd: int, path: Path) -> bool:
    try:
        now = os.stat(path, follow_symlinks=False)
    except FileNotFoundError:
        return False
    mine = os.fstat(fd)
    return (now.st_dev, now.st_ino) == (mine.st_dev, mine.st_ino)


def _acquire(folder: Path, timeout: float, shown: Path) -> int:
    if not folder.is_dir():
        raise PlanDirError(f"{shown}: no such plan folder; give a folder made by 'fieldplan plan'")
    deadline = time.monotonic() + timeout
    while True:
        fd = _open_lock_file(folder)
        if _try_lock(fd):
            if _same_file(fd, folder / LOCK_NAME):
                return fd
            _unlock(fd)  # the folder was replaced while we waited: lock the new one
            os.close(fd)
            continue
        os.close(fd)
        if time.monotonic() >= deadline:
            raise PlanBusyError(
                f"{shown}: the plan is busy (another fieldplan command, the web workspace or a "
                f"phone sync is changing it; waited {timeout:g} s); retry in a moment"
            )
        # Jitter keeps two waiters from polling in step.
        time.sleep(0.02 + 0.03 * random.random())


@contextmanager
def plan_lock(plan_dir: str | Path, *, timeout: float | None = None) -> Iterator[Path]:
    """Hold the write lock of a plan folder; yield the folder.

    Parameters
    ----------
    plan_dir : path
        The plan folder.
    timeout : float, optional
        Seconds to wait for another holder (default :data:`DEFAULT_TIMEOUT_S`,
        or ``$FIELDPLAN_LOCK_TIMEOUT``).

    Raises
    ------
    PlanBusyError
        If the lock is still held by another process or thread after ``timeout``.
    PlanDirError
        If the folder is missing, not writable, or its lock file is a link.
    """
    plan_dir = Path(plan_dir)
    key = _key(plan_dir)
    held = _held()
    if key in held:
        held[key] += 1
        try:
            yield plan_dir
        finally:
            held[key] -= 1
        return
    fd = _acquire(Path(key), _timeout(timeout), plan_dir)
    held[key] = 1
    try:
        yield plan_dir
    finally:
        del held[key]
        try:
            _unlock(fd)
        finally:
            os.close(fd)
