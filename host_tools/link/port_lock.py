"""One client per port: a lock file beside every port the host opens.

PortLock(path).acquire() takes an exclusive lock on <temp dir>/edgevib-port-<name>.lock and
writes the holder (process id and command line) into it; a second client gets PortBusy ("port
/dev/ttyACM0 in use by pid 4242: edgevib monitor ..."), exit status 2. The lock is an OS file
lock (fcntl.flock on POSIX, msvcrt.locking on Windows), so it goes with the process that held
it, however that process ends: no stale lock survives a crash or a kill -9. The serial port is
also opened with pyserial's exclusive=True where the platform has it (POSIX), which stops other
programs that ask for exclusive access; the lock file covers every platform and names the holder.
"""
from __future__ import annotations

import os
import re
import sys
import tempfile

from host_tools.errors import EdgevibError

try:
    import fcntl
except ImportError:            # Windows
    fcntl = None
    import msvcrt


class PortBusy(EdgevibError):
    """Another client holds the port."""


def lock_path(port: str) -> str:
    """The lock file of a port name (any characters but letters, digits, . and - become _)."""
    return os.path.join(tempfile.gettempdir(), "edgevib-port-" + re.sub(r"[^A-Za-z0-9.-]", "_", port) + ".lock")


class PortLock:
    def __init__(self, port: str):
        self.port = port
        self.path = lock_path(port)
        self._fd: int | None = None

    def acquire(self) -> "PortLock":
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o666)
        try:
            if fcntl is not None:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            else:
                msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)
        except OSError:
            holder = _holder(fd)
            os.close(fd)
            raise PortBusy(f"port {self.port} in use by {holder or 'another program'}") from None
        os.ftruncate(fd, 0)
        os.write(fd, f"pid {os.getpid()}: {' '.join(_argv())}\n".encode())
        self._fd = fd
        return self

    def release(self) -> None:
        if self._fd is None:
            return
        try:
            os.ftruncate(self._fd, 0)
        except OSError:
            pass
        os.close(self._fd)         # closing drops the lock
        self._fd = None


def _argv() -> list[str]:
    name = os.path.basename(sys.argv[0]) if sys.argv and sys.argv[0] else "python"
    return (["edgevib"] if name in ("edgevib", "__main__.py", "cli.py") else [name]) + sys.argv[1:]


def _holder(fd: int) -> str:
    try:
        os.lseek(fd, 0, os.SEEK_SET)
        return os.read(fd, 200).decode(errors="replace").strip()
    except OSError:
        return ""
