"""One method per device command (docs/protocol.md). Methods never touch bytes on the wire;
multi-chunk transfers (parameter sets, events, raw windows) are reassembled here.

Entry points: Client.
"""
from __future__ import annotations

import hmac

import firmware_py  # noqa: F401
from firmware_py.store.paramstore import rollback_message
from host_tools.link.protocol import Link
from host_tools.link.transport import open_transport

CHUNK = 512   # parameter bytes per param_write request; fits the device's 1 KB request buffer


class Client:
    def __init__(self, link: Link):
        self.link = link

    @classmethod
    def open(cls, port: str, timeout_s: float = 1.0, retries: int = 2,
             key: bytes | None = None) -> "Client":
        return cls(Link(open_transport(port), timeout_s, retries, key))

    def close(self) -> None:
        self.link.close()

    def _read_all(self, cmd: str, **args) -> bytes:
        out = bytearray()
        while True:
            r = self.link.request(cmd, off=len(out), **args)
            out += r["data"]
            if len(out) >= r["total"] or not r["data"]:
                return bytes(out)

    def identify(self) -> dict:
        return self.link.request("identify")

    def status(self) -> dict:
        return self.link.request("status")

    def stream(self, on: bool) -> None:
        self.link.request("stream", on=on)

    def param_read(self) -> bytes:
        """The committed parameter image (firmware_py.store.paramstore layout)."""
        return self._read_all("param_read")

    def param_write(self, image: bytes, progress=None, chunk: int = CHUNK) -> None:
        """Stage image in chunks; progress(done, total) after each."""
        for off in range(0, len(image), chunk):
            part = image[off:off + chunk]
            self.link.request("param_write", off=off, data=part)
            if progress:
                progress(off + len(part), len(image))

    def param_verify(self, size: int) -> dict:
        """{version, crc} of the staged image, checked by the device."""
        return self.link.request("param_verify", size=size)

    def param_commit(self) -> int:
        return self.link.request("param_commit")["version"]

    def rollback(self, key: bytes | None = None) -> int:
        """Return to the previous set; with a site key the command is signed."""
        args = {}
        if key:
            info = self.identify()
            msg = rollback_message(info["param_version"], info["param_previous"])
            args["sig"] = hmac.new(key, msg, "sha256").digest()
        return self.link.request("rollback", **args)["version"]

    def acknowledge(self) -> bool:
        return self.link.request("ack")["latched"]

    def learn(self, on: bool) -> None:
        self.link.request("learn", on=on)

    def event_list(self) -> list:
        return self.link.request("event_list")["events"]

    def event_read(self, sid: int) -> bytes:
        """An event capture's file image, read a chunk per request (parse with
        firmware_py.store.snapshots.parse, which checks its CRC)."""
        return self._read_all("event_read", id=sid)

    def capture(self) -> bytes:
        """A fresh raw window: int16 little-endian counts, axis-major."""
        return self._read_all("capture")

    def set_clock(self, t: int) -> None:
        self.link.request("clock", t=int(t))

    def reboot(self) -> None:
        self.link.request("reboot")
