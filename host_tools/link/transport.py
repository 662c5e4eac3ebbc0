"""Transports: bytes in and out of a port, chosen by a URL-like name.

  /dev/ttyUSB0, COM3, serial:/dev/ttyACM0?baud=460800   a serial port (pyserial)
  pty:                the device end of a new pseudo-terminal pair; .port names the other end
  loop:               an in-memory echo loop (what is written is read back)
memory_pair() gives two connected in-memory ends for tests.
Every transport has write(data), read(max_bytes, timeout_s) -> bytes (empty on timeout), close().
"""
from __future__ import annotations

import os
import select
import threading
import tty

from host_tools.errors import EdgevibError, LinkError
from host_tools.link.port_lock import PortBusy, PortLock

DEFAULT_BAUD = 115200


class SerialTransport:
    """A serial device through pyserial."""

    def __init__(self, path: str, baud: int = DEFAULT_BAUD):
        import serial

        self._lock = PortLock(path).acquire()        # PortBusy (exit 2) if another client has it
        try:
            # exclusive: a POSIX flock on the port itself (pyserial); Windows ports are exclusive
            extra = {"exclusive": True} if os.name == "posix" else {}
            self._port = serial.Serial(path, baudrate=baud, timeout=0, **extra)
        except (serial.SerialException, OSError, ValueError) as e:
            self._lock.release()
            if "exclusive" in str(e) or "lock" in str(e).lower():
                raise PortBusy(f"port {path} in use by another program ({e})") from None
            raise EdgevibError(f"cannot open serial port {path}: {e}") from None
        self.port = path

    def write(self, data: bytes) -> None:
        try:
            self._port.write(data)
            self._port.flush()
        except Exception as e:  # pyserial raises several unrelated types for a vanished port
            raise LinkError(f"write to {self.port} failed: {e}") from e

    def read(self, max_bytes: int, timeout_s: float) -> bytes:
        try:
            self._port.timeout = max(timeout_s, 0.0)
            first = self._port.read(1)
            if not first:
                return b""
            self._port.timeout = 0
            return first + self._port.read(max_bytes - 1)
        except Exception as e:
            raise LinkError(f"read from {self.port} failed: {e}") from e

    def close(self) -> None:
        self._port.close()
        self._lock.release()


class PtyTransport:
    """The device end (master) of a pseudo-terminal pair; a host opens .port as a serial port."""

    def __init__(self) -> None:
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave)    # no echo, no line editing: bytes pass unchanged
        self.port = os.ttyname(self._slave)

    def write(self, data: bytes) -> None:
        view = memoryview(data)
        while view:
            n = os.write(self._master, view)
            view = view[n:]

    def read(self, max_bytes: int, timeout_s: float) -> bytes:
        ready, _, _ = select.select([self._master], [], [], max(timeout_s, 0.0))
        if not ready:
            return b""
        try:
            return os.read(self._master, max_bytes)
        except OSError:
            return b""

    def close(self) -> None:
        for fd in (self._master, self._slave):
            try:
                os.close(fd)
            except OSError:
                pass


class LoopTransport:
    """One end of an in-memory link. Bytes written go to the peer, or to on_data if the peer set
    it (then the peer's handler runs synchronously inside write, handy for a device under test)."""

    def __init__(self) -> None:
        self.peer: LoopTransport | None = None
        self.on_data = None
        self._buf = bytearray()
        self._cond = threading.Condition()

    def _deliver(self, data: bytes) -> None:
        if self.on_data is not None:
            self.on_data(bytes(data))
            return
        with self._cond:
            self._buf += data
            self._cond.notify_all()

    def write(self, data: bytes) -> None:
        (self.peer or self)._deliver(data)

    def read(self, max_bytes: int, timeout_s: float) -> bytes:
        with self._cond:
            if not self._buf:
                self._cond.wait(max(timeout_s, 0.0))
            out = bytes(self._buf[:max_bytes])
            del self._buf[:max_bytes]
            return out

    def close(self) -> None:
        pass


def memory_pair() -> tuple[LoopTransport, LoopTransport]:
    """Two connected in-memory ends: what one writes, the other reads."""
    a, b = LoopTransport(), LoopTransport()
    a.peer, b.peer = b, a
    return a, b


def open_transport(name: str):
    """Open a transport by name (see the module docstring); raises LinkError if it cannot."""
    if name == "loop:":
        return LoopTransport()
    if name == "pty:":
        return PtyTransport()
    baud = DEFAULT_BAUD
    path = name[len("serial:"):] if name.startswith("serial:") else name
    if "?" in path:
        path, query = path.split("?", 1)
        for item in query.split("&"):
            key, _, value = item.partition("=")
            if key != "baud" or not value.isdigit():
                raise EdgevibError(f"unknown port option '{item}' in {name} (only baud=N)")
            baud = int(value)
    if not path:
        raise EdgevibError(f"no port named in '{name}'")
    return SerialTransport(path, baud)
