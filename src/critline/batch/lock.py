"""One batch at a time per output folder: an advisory lock file.

Two runs writing the same cache and reports at once would not corrupt single
files (every write is atomic), but they would read every photo twice and
interleave two sets of reports.  So a run holds ``<out>/.critline-batch.lock``
while it reads and writes; a second run on the same folder stops at once with
one line naming the holder's process id (exit code 2).

The lock is an ``flock(2)`` on that file, so the kernel releases it when the
holding process ends for any reason (even ``SIGKILL``): a lock file left behind
by a dead run is stale by construction and the next run simply takes it over.
The file holds the holder's PID (for the message) and is removed on release.
After locking, the holder checks that the path still names the file it
locked (another run may have removed it meanwhile) and tries again if not:
the usual pattern that keeps unlink-on-release free of races.
"""

from __future__ import annotations

import errno
import fcntl
import os
from pathlib import Path

from critline.errors import UsageError

LOCK_NAME = ".critline-batch.lock"


class OutputInUse(UsageError):
    """Another critline batch holds the output folder."""

    def __init__(self, folder: Path, pid: int | None):
        who = f"pid {pid}" if pid is not None else "pid unknown"
        super().__init__(f"{folder}: output folder is in use by another critline batch ({who})")
        self.folder = folder
        self.pid = pid


def _pid_in(fd: int) -> int | None:
    try:
        text = os.pread(fd, 64, 0).decode("ascii", "replace").split()
        return int(text[0]) if text else None
    except (OSError, ValueError):
        return None


def pid_alive(pid: int) -> bool:
    """True when a process with this id exists (signal 0 probes without sending anything)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # exists, owned by someone else
        return True
    return True


class OutputLock:
    """Exclusive hold on an output folder for the life of a batch.

    Use as a context manager::

        with OutputLock(out_dir):
            ...  # read, cache, write reports

    Raises
    ------
    OutputInUse
        When another process holds the folder (its PID is in the message).
    UsageError
        When the folder cannot be created or the lock file cannot be opened.
    """

    def __init__(self, folder: str | Path):
        self.folder = Path(folder)
        self.path = self.folder / LOCK_NAME
        self._fd: int | None = None
        self._made_folder = False

    def acquire(self) -> OutputLock:
        try:
            self._made_folder = not self.folder.exists()
            self.folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise UsageError(f"{self.folder}: cannot create the output folder ({exc.strerror or exc})") from None
        for _ in range(20):
            try:
                fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            except OSError as exc:
                raise UsageError(f"{self.path}: cannot open the lock file ({exc.strerror or exc})") from None
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError as exc:
                holder = _pid_in(fd)
                os.close(fd)
                if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                    raise OutputInUse(self.folder, holder) from None
                raise UsageError(f"{self.path}: cannot lock ({exc.strerror or exc})") from None
            try:
                same = os.fstat(fd).st_ino == os.stat(self.path).st_ino
            except FileNotFoundError:
                same = False
            if not same:  # removed (released) by its holder between our open and flock: again
                os.close(fd)
                continue
            # ours: a PID left by a run that died is stale (its flock went with it), replace it
            os.ftruncate(fd, 0)
            os.pwrite(fd, f"{os.getpid()}\n".encode("ascii"), 0)
            self._fd = fd
            return self
        raise UsageError(f"{self.path}: the lock file keeps changing; is another batch starting and stopping?")

    def release(self) -> None:
        if self._fd is None:
            return
        try:
            os.unlink(self.path)
        except OSError:
            pass
        finally:
            os.close(self._fd)
            self._fd = None
        if self._made_folder:  # a run that stopped before writing anything leaves no empty folder
            try:
                self.folder.rmdir()
            except OSError:
                pass

    @property
    def held(self) -> bool:
        return self._fd is not None

    def __enter__(self) -> OutputLock:
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()


def holder(folder: str | Path) -> int | None:
    """PID of the live process holding ``folder``'s lock, or None (no lock, or a stale one)."""
    path = Path(folder) / LOCK_NAME
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return None
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except OSError:
            pid = _pid_in(fd)
            return pid if pid is not None and pid_alive(pid) else None
        fcntl.flock(fd, fcntl.LOCK_UN)
        return None
    finally:
        os.close(fd)


def hold_for_command(folder: str | Path, ctx=None) -> OutputLock:
    """Lock ``folder`` until the running command finishes.

    ``ctx`` is the command's (typer/click) context: the lock is released when
    it closes, also when the command fails.  Without one the lock is released
    when this process exits.
    """
    lock = OutputLock(folder).acquire()
    if ctx is not None and hasattr(ctx, "call_on_close"):
        ctx.call_on_close(lock.release)
    else:
        import atexit

        atexit.register(lock.release)
    return lock
