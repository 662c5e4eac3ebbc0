"""Event captures: the raw windows that led to an alert or alarm and a stretch after it, kept in
RAM while they form and then in a bounded ring of files (oldest overwritten) for the engineer
to pull (docs/protocol.md, "Event captures"; sizes per board in docs/boards.md).

In RAM: one int16 buffer of pre + post windows (board.capture_plan sizes them from the
profile), made once at start. keep() copies every analysed window into it, allocation-free
(the gateway calls it under the heap lock): while idle into a ring of `pre` slots, the last
`pre` windows; after trigger() the next `post` windows into the slots behind them. A gap in
the samples (frames lost or skipped before a window) restarts the history, or ends the
stretch after the trigger early, so a capture is always contiguous samples. The window that
raised the event is the last of the `pre` windows.

On flash: file "ev<slot>.bin" =
    MessagePack map {id, t, kind, fs_hz, n, axes, pre, post, features: [int], reason,
                     feature, score_q8, mode}
    then pre + post windows in time order, each axis-major int16 little-endian counts
    (n samples of axis 0, then axis 1, ...), then the CRC-32 of all before it (LE).
work() writes a finished capture a step at a time (header; one window per call; CRC, close,
rename), so the board's main loop never stalls long. The file is written as "ev.tmp" and
renamed into its slot only when whole: a cut while writing leaves a short ev.tmp, removed at
the next start; a cut between removing the old slot file and the rename leaves a whole ev.tmp,
moved into its slot at the next start. A slot file is listed only if its header parses and
its length is exactly what the header says; the CRC guards the content on the way to the host
(parse()). Ids increase across reboots (the files are scanned at start).

Entry points: parse(), ram_bytes(), file_bytes(), SnapshotRing."""
import os
from array import array
from micropython import const
from firmware_py.codec import mpack
from firmware_py.codec.crc32 import crc32_end, crc32_ok, crc32_run, crc32_start
from firmware_py.dsp.ring import scatter16

META_CAP = const(1024)   # bytes for the header map; features of a few hundred fields fit
_IDLE = const(0)         # keeping the last `pre` windows
_POST = const(1)         # triggered: recording the windows after it
_SAVE = const(2)         # whole: being written to flash by work()
_HEAD = const(16)        # header bytes read at start to list a file


def ram_bytes(axes, n, windows):
    """RAM of a capture buffer of `windows` windows of n frames of `axes` int16 counts."""
    return 2 * axes * n * windows


def file_bytes(axes, n, windows):
    """Flash bytes of one capture file at most: header map, samples, CRC-32."""
    return META_CAP + ram_bytes(axes, n, windows) + 4


def parse(img):
    """(meta dict, raw bytes of all its windows) of a capture file image; ValueError if invalid."""
    if not crc32_ok(img, 0, len(img)):
        raise ValueError("snapshot CRC mismatch")
    r = mpack.Reader(img, 0, len(img) - 4)
    meta = r.unpack()
    if not isinstance(meta, dict) or "id" not in meta:
        raise ValueError("snapshot header is not a map with an id")
    return meta, bytes(img[r.pos:len(img) - 4])


class SnapshotRing:
    """slots files under root; windows of n frames of `axes` counts at fs_hz; pre windows kept
    before a trigger (at least 1: the trigger window) and post recorded after it."""

    def __init__(self, root, slots, fs_hz, n, axes, pre=1, post=0):
        self.root = root
        self.slots = slots
        self.fs_hz = fs_hz
        self.n = n
        self.axes = axes
        self.pre = pre
        self.post = post
        self.win = n * axes                         # counts per window
        self.buf = array('h', bytes(ram_bytes(axes, n, pre + post)))
        self.phase = _IDLE
        self.head = 0           # pre slot the next kept window goes to
        self.have = 0           # windows held before the trigger (at most pre)
        self.got = 0            # windows recorded after it
        self.busy = 0           # events that came while a capture was forming or being written
        self._meta = {}         # header map of the capture being formed
        self._w = mpack.Writer(bytearray(META_CAP))
        self._reg = array('H', bytes(4))             # running CRC of the file being written
        self._crc = bytearray(4)
        self._k = -1            # windows written to ev.tmp (self._f, made by _open); -1: not open
        self._recover()
        # per slot: {id, t, kind, size} of a listed file, or {}
        self._index = [self._scan(self._path(s)) for s in range(slots)]
        self.next_id = 0
        for e in self._index:
            if e and e["id"] >= self.next_id:
                self.next_id = e["id"] + 1

    # ---- in RAM, per window (allocation-free) ----
    def keep(self, raw, gap):
        """Take the window just analysed (raw: array('h') of n * axes counts, axis-major);
        gap: frames missing just before it. Allocation-free."""
        if self.phase == _IDLE:
            if gap:
                self.have = 0
            scatter16(self.buf, raw, 0, 1, self.win, self.head * self.win, len(self.buf))
            self.head += 1
            if self.head == self.pre:
                self.head = 0
            if self.have < self.pre:
                self.have += 1
        elif self.phase == _POST:
            if gap:
                self.phase = _SAVE          # never splice: the stretch after it ends here
                return
            scatter16(self.buf, raw, 0, 1, self.win, (self.pre + self.got) * self.win, len(self.buf))
            self.got += 1
            if self.got == self.post:
                self.phase = _SAVE

    # ---- forming and writing a capture (allocates: outside the heap lock) ----
    def trigger(self, kind, t, features, extra):
        """An event on the window just kept: kind "alert"/"alarm", t clock seconds at its end,
        features its feature vector, extra a dict of more header fields (reason, feature,
        score_q8, mode). Returns the capture's id, or -1 if one is still forming or being
        written (counted in busy: that event has no capture of its own)."""
        if self.phase != _IDLE or self.have == 0:
            self.busy += 1
            return -1
        sid = self.next_id
        self.next_id += 1
        m = {"id": sid, "t": t, "kind": kind, "fs_hz": self.fs_hz, "n": self.n, "axes": self.axes,
             "features": list(features)}
        for k in extra:
            m[k] = extra[k]
        self._meta = m
        self.got = 0
        self.phase = _POST if self.post else _SAVE
        return sid

    def forming(self):
        """True while a capture is recorded or written (trigger() would return -1)."""
        return self.phase != _IDLE

    def work(self):
        """One step of writing a whole capture to flash (call once per main-loop pass): the header,
        then one window per call, then the CRC and the rename. Does nothing otherwise."""
        if self.phase != _SAVE:
            return
        if self._k < 0:
            self._open()
        elif self._k < self.have + self.got:
            k = self._k
            slot = (self.head - self.have + k) % self.pre if k < self.have else self.pre + k - self.have
            a = slot * self.win
            part = bytes(memoryview(self.buf)[a:a + self.win])
            crc32_run(self._reg, part, 0, len(part))
            self._f.write(part)
            self._k = k + 1
        else:
            self._close()

    def _open(self):
        m = self._meta
        m["pre"] = self.have
        m["post"] = self.got
        w = self._w
        w.reset()
        w.pack(m)
        crc32_start(self._reg)
        crc32_run(self._reg, w.buf, 0, w.pos)
        self._f = open(self.root + "/ev.tmp", "wb")
        self._f.write(memoryview(w.buf)[0:w.pos])
        self._k = 0

    def _close(self):
        f = self._f
        crc32_end(self._reg, self._crc, 0)
        f.write(self._crc)
        f.close()
        self._k = -1
        slot = self._meta["id"] % self.slots
        self._index[slot] = {}
        self._commit(slot)
        self._index[slot] = self._scan(self._path(slot))
        self._meta = {}
        self.phase = _IDLE
        self.have = 0            # the windows kept so far were this capture's
        self.head = 0

    def _commit(self, slot):
        """Move the whole ev.tmp into slot (the old file there removed first)."""
        path = self._path(slot)
        try:
            os.remove(path)
        except OSError:
            pass
        os.rename(self.root + "/ev.tmp", path)

    def _recover(self):
        """At start: a whole ev.tmp (cut before its rename) goes to its slot; a short one goes."""
        tmp = self.root + "/ev.tmp"
        e = self._scan(tmp)
        if e:
            self._commit(e["id"] % self.slots)
            return
        try:
            os.remove(tmp)
        except OSError:
            pass

    # ---- the files ----
    def _path(self, slot):
        return "%s/ev%d.bin" % (self.root, slot)

    def _scan(self, path):
        """{id, t, kind, size} of the capture file at path if its header parses and its length
        is what the header says; else {}. Reads the header only."""
        try:
            size = os.stat(path)[6]
            with open(path, "rb") as f:
                head = f.read(META_CAP)
        except OSError:
            return {}
        try:
            r = mpack.Reader(head, 0, len(head))
            m = r.unpack()
            want = r.pos + 2 * m["axes"] * m["n"] * (m["pre"] + m["post"]) + 4
            if size != want:
                return {}
            return {"id": m["id"], "t": m["t"], "kind": m["kind"], "size": size}
        except Exception:       # not a capture header: a torn or foreign file is not listed
            return {}

    def list(self):
        """[{id, t, kind, size}] of the captures on flash, oldest first."""
        out = [dict(e) for e in self._index if e]
        out.sort(key=lambda e: e["id"])
        return out

    def _slot_of(self, sid):
        e = self._index[sid % self.slots]
        return e if e and e["id"] == sid else None

    def read(self, sid, off, k):
        """Bytes [off, off+k) of capture sid's file, or None if it is gone."""
        if self._slot_of(sid) is None:
            return None
        try:
            with open(self._path(sid % self.slots), "rb") as f:
                f.seek(off)
                return f.read(k)
        except OSError:
            return None

    def size(self, sid):
        """File size of capture sid, or None if it is gone."""
        e = self._slot_of(sid)
        return None if e is None else e["size"]
