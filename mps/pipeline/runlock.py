"""The exclusive lock of a run directory, and the clean-up of what a killed writer left behind.

One process at a time writes a run (or scan) directory. The lock is an advisory ``flock`` on
``DIR/.lock``, held for the lifetime of a ``with`` block; the kernel drops it when its holder dies
in any way (SIGKILL included), so a lock file left behind by a dead process is simply taken over,
with a message naming it. The file holds ``<pid> <host>`` of the holder so that a refusal can name
it. Two safety nets for file systems where ``flock`` is not shared between machines (some network
mounts): a lock file of the older pid-only form whose process still runs is refused even when
the kernel lock is free, and a holder on another host is refused (its liveness cannot be checked
from here) with the advice to delete the lock file once that process is known to be gone.

Writers put their data under ``.<name>.tmp-<pid>`` and rename it into place; a writer killed in
between leaves that temporary file. Taking the lock removes temporaries of processes of this host
that are no longer running.
"""

from __future__ import annotations

import fcntl
import os
import re
import socket
from collections.abc import Callable
from pathlib import Path

from mps.pipeline.errors import InputError

LOCK = ".lock"
_TEMPORARY = re.compile(r"^\..+\.tmp-(\d+)$")


def alive(pid: int) -> bool:
    """Is process ``pid`` of this host running? A zombie (killed, not yet reaped: common in
    containers whose first process does not reap orphans) counts as dead."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError):
        return pid > 0
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except (OSError, IndexError):
        return True


def _holder(text: str) -> tuple[int, str]:
    """(pid, host) of a lock file's text; an older lock file holds the pid alone (this host)."""
    parts = text.split()
    try:
        pid = int(parts[0]) if parts else 0
    except ValueError:
        pid = 0
    return pid, (parts[1] if len(parts) > 1 else socket.gethostname())


def remove_temporaries(directory: Path) -> list[Path]:
    """Delete ``.<name>.tmp-<pid>`` files of ``directory`` and its plots whose writer is gone."""
    removed = []
    for folder in (directory, directory / "plots"):
        for path in (folder.iterdir() if folder.is_dir() else ()):
            m = _TEMPORARY.match(path.name)
            if m and int(m.group(1)) != os.getpid() and not alive(int(m.group(1))):
                path.unlink(missing_ok=True)
                removed.append(path)
    return removed


class RunLock:
    """Exclusive lock on a run directory for the lifetime of a ``with`` block; ``say`` gets the
    one-line notice when a dead writer's lock or temporary files are taken over."""

    def __init__(self, directory: Path, say: Callable[[str], None] | None = None):
        self.directory = Path(directory)
        self.path = self.directory / LOCK
        self.say = say or (lambda text: None)
        self.fd: int | None = None

    def __enter__(self) -> "RunLock":
        host = socket.gethostname()
        for _ in range(5):
            fd = os.open(self.path, os.O_CREAT | os.O_RDWR, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                os.close(fd)
                pid, where = _holder(self._read())
                raise InputError(f"{self.directory}: another chargewise process (pid {pid} on {where}) "
                                 "is writing this run directory") from None
            if not self._same_file(fd):   # the previous holder removed the file meanwhile: retry
                os.close(fd)
                continue
            text = os.pread(fd, 256, 0).decode("utf-8", "replace")
            self._refuse_unlocked_holder(fd, text, host)
            os.ftruncate(fd, 0)
            os.pwrite(fd, f"{os.getpid()} {host}\n".encode(), 0)
            self.fd = fd
            if text.strip():
                pid, _ = _holder(text)
                self.say(f"taking over the lock of process {pid}, which is no longer running")
            if remove_temporaries(self.directory):
                self.say("removed unfinished temporary files of a stopped writer (the files they "
                         "were to replace are intact)")
            return self
        raise InputError(f"{self.directory}: cannot take the run-directory lock")

    def _read(self) -> str:
        try:
            return self.path.read_text(encoding="utf-8", errors="replace")
        except OSError:
            return ""

    def _same_file(self, fd: int) -> bool:
        try:
            return os.stat(self.path).st_ino == os.fstat(fd).st_ino
        except FileNotFoundError:
            return False

    def _refuse_unlocked_holder(self, fd: int, text: str, host: str) -> None:
        """Safety nets where the kernel lock may not tell (see the module docstring): a holder on
        another host, and a lock file of the older pid-only form whose process is running."""
        if not text.strip():
            return
        pid, where = _holder(text)
        if where != host:
            os.close(fd)
            raise InputError(f"{self.directory}: locked by pid {pid} on host {where}; if that process "
                             f"has ended, delete {self.path} and try again")
        if len(text.split()) == 1 and pid != os.getpid() and alive(pid):
            os.close(fd)
            raise InputError(f"{self.directory}: another chargewise process (pid {pid} on {where}) "
                             "is writing this run directory")

    def __exit__(self, *exc) -> None:
        if self.fd is not None:
            self.path.unlink(missing_ok=True)
            os.close(self.fd)
            self.fd = None
