"""Event snapshots: on each transition into alert or alarm the application saves the raw window
and its features, in a bounded ring of files (oldest overwritten) for the engineer to pull.

File "ev<slot>.bin":  MessagePack map {id, t, kind, fs_hz, n, axes, features: [int]}
                      then the raw window, int16 little-endian counts, axis-major
                      (n samples of axis 0, then axis 1, ...), then CRC-32 of all before (LE).
Ids increase across reboots (the ring is scanned at start). A cut while saving loses at most
that one snapshot: the file is written under a temporary name and renamed into its slot.
Not per-window code: runs once per event and allocates.

Entry points: parse(), SnapshotRing."""
import os
from micropython import const
from firmware_py.codec import mpack
from firmware_py.codec.crc32 import crc32_into, crc32_ok

_META_CAP = const(1024)   # bytes for the header map; features of a few hundred fields fit


def parse(img):
    """(meta dict, raw window bytes) of a snapshot file image; raises ValueError if invalid."""
    if not crc32_ok(img, 0, len(img)):
        raise ValueError("snapshot CRC mismatch")
    r = mpack.Reader(img, 0, len(img) - 4)
    meta = r.unpack()
    if not isinstance(meta, dict) or "id" not in meta:
        raise ValueError("snapshot header is not a map with an id")
    return meta, bytes(img[r.pos:len(img) - 4])


class SnapshotRing:
    """slots files under root; save() overwrites the oldest once the ring is full."""

    def __init__(self, root, slots, fs_hz, n, axes):
        self.root = root
        self.slots = slots
        self.fs_hz = fs_hz
        self.n = n
        self.axes = axes
        self._meta = mpack.Writer(bytearray(_META_CAP))
        self._crc = bytearray(4)
        self.next_id = 0
        for e in self.list():
            if e["id"] >= self.next_id:
                self.next_id = e["id"] + 1

    def _path(self, slot):
        return "%s/ev%d.bin" % (self.root, slot)

    def save(self, kind, t, features, raw):
        """Save one event; kind "alert" or "alarm", t clock seconds, features a sequence of
        ints, raw the window as int16 counts (array('h') or bytes, axis-major). Returns its id."""
        sid = self.next_id
        self.next_id += 1
        w = self._meta
        w.reset()
        w.pack({"id": sid, "t": t, "kind": kind, "fs_hz": self.fs_hz, "n": self.n,
                "axes": self.axes, "features": list(features)})
        body = bytes(w.buf[0:w.pos]) + bytes(raw)
        crc32_into(body, 0, len(body), self._crc, 0)
        path = self._path(sid % self.slots)
        tmp = self.root + "/ev.tmp"
        with open(tmp, "wb") as f:
            f.write(body)
            f.write(self._crc)
        try:
            os.remove(path)
        except OSError:
            pass
        os.rename(tmp, path)
        return sid

    def _load(self, slot):
        try:
            with open(self._path(slot), "rb") as f:
                img = f.read()
            return img, parse(img)[0]
        except (OSError, ValueError):
            return None

    def list(self):
        """[{id, t, kind, size}] of the valid snapshots, oldest first."""
        out = []
        for s in range(self.slots):
            got = self._load(s)
            if got:
                m = got[1]
                out.append({"id": m["id"], "t": m.get("t"), "kind": m.get("kind"),
                            "size": len(got[0])})
        out.sort(key=lambda e: e["id"])
        return out

    def read(self, sid, off, k):
        """Bytes [off, off+k) of snapshot sid's file image, or None if it is gone."""
        got = self._load(sid % self.slots)
        if got is None or got[1]["id"] != sid:
            return None
        return got[0][off:off + k]

    def size(self, sid):
        """File size of snapshot sid, or None if it is gone."""
        got = self._load(sid % self.slots)
        return len(got[0]) if got and got[1]["id"] == sid else None
