"""Frames over a transport: requests with sequence numbers, replies matched to them, timeouts
and retries. Framing (COBS + CRC-32) is firmware_py.link.frames, the device's own code; payloads
are MessagePack through the reference `msgpack` library. Raises LinkError on any failure."""
from __future__ import annotations

import collections
import hmac
import os
import time

import msgpack

import firmware_py  # noqa: F401  (installs the micropython stand-in the device modules import)
from firmware_py.link import auth, frames
from host_tools.errors import LinkError

MAX_PAYLOAD = 65536   # the host accepts larger frames than any device sends
FREE_RESENDS = 4      # resends after a frame-error reply that do not use up a try


class DeviceRefused(LinkError):
    """The device answered with an error reply; .code is its err field (see docs/protocol.md).

    The gateway answered, so the request was wrong (bad argument, refused set, missing event,
    wrong or missing signature): exit status 2, like any bad input. Only "fail" (the gateway
    raised doing it) and "frame" (damaged on the wire) are device or link trouble: 3."""

    def __init__(self, cmd: str, code: str, msg: str):
        super().__init__(f"gateway refused {cmd}: {msg}")
        self.code = code
        self.exit_status = 3 if code in ("fail", "frame") else 2


class Link:
    """Request/reply over transport. timeout_s per attempt, retries extra attempts."""

    def __init__(self, transport, timeout_s: float = 1.0, retries: int = 2, key: bytes | None = None):
        self.transport = transport
        self.key = key            # site key: commands in firmware_py.link.auth.SIGNED are signed
        self._nonce: str | None = None
        self.timeout_s = timeout_s
        self.retries = retries
        self._rx = frames.Receiver(MAX_PAYLOAD)
        # Start at a random seq so a new session never repeats the device's last request
        # bytes (the device would answer from its retry cache).
        self._seq = int.from_bytes(os.urandom(2), "little") % 0xFFFF
        self._ready: collections.deque = collections.deque()   # decoded frames not yet taken
        self.pushes: collections.deque = collections.deque()   # unsolicited messages
        self.frames_sent = 0
        self.bad_frames = 0

    def _frame(self, msg: dict) -> bytes:
        payload = msgpack.packb(msg, use_bin_type=True)
        buf = bytearray(payload) + bytearray(4)
        out = bytearray(frames.wire_size(len(payload)))
        return bytes(out[:frames.encode(buf, len(payload), out)])

    def _pump(self, timeout_s: float) -> int:
        """Read what arrives within timeout_s and queue every good frame; the bytes read."""
        data = self.transport.read(4096, timeout_s)
        for b in data:
            k = self._rx.push(b)
            if k < 0:
                self.bad_frames += 1
            elif k > 0:
                try:
                    msg = msgpack.unpackb(bytes(self._rx.buf[:k]), raw=False)
                except Exception:
                    self.bad_frames += 1
                    continue
                if isinstance(msg, dict) and "push" in msg:
                    self.pushes.append(msg)
                elif isinstance(msg, dict):
                    self._ready.append(msg)
                else:
                    self.bad_frames += 1
        return len(data)

    def request(self, cmd: str, **args) -> dict:
        """Send cmd with args and return the reply's results (seq and ok removed). With a site
        key, a command in auth.SIGNED is signed over the device's current nonce; a nonce that
        went stale (another client's signed command) is fetched again once."""
        if self.key and cmd in auth.SIGNED:
            try:
                return self._signed(cmd, args)
            except DeviceRefused as e:
                if e.code != "auth":
                    raise
                self._nonce = None
                return self._signed(cmd, args)
        return self._exchange(cmd, args)

    def _signed(self, cmd: str, args: dict) -> dict:
        if self._nonce is None:
            self._nonce = self._exchange("identify", {})["nonce"]
        sig = hmac.new(self.key, auth.message(cmd, self._nonce, args), "sha256").digest()
        self._nonce = None
        r = self._exchange(cmd, {**args, "sig": sig})
        self._nonce = r.pop("nonce", None)
        return r

    def _exchange(self, cmd: str, args: dict) -> dict:
        """One request, its retries, and the reply for its sequence number only."""
        self._seq = self._seq % 0xFFFF + 1
        seq = self._seq
        frame = self._frame({"seq": seq, "cmd": cmd, **args})
        self._drain()
        tries, free = 0, FREE_RESENDS
        while tries < self.retries + 1:
            tries += 1
            self.transport.write(frame)
            self.frames_sent += 1
            deadline = time.monotonic() + self.timeout_s
            while True:
                reply = self._take(seq)
                if reply == "resend":
                    if free > 0:         # a damaged frame: resend, not counted as a try
                        free -= 1
                        tries -= 1
                    break
                if reply is not None:
                    if not reply.get("ok"):
                        raise DeviceRefused(cmd, str(reply.get("err")), str(reply.get("msg")))
                    return {k: v for k, v in reply.items() if k not in ("seq", "ok")}
                left = deadline - time.monotonic()
                if left <= 0:
                    break
                self._pump(left)
        raise LinkError(f"no reply to {cmd} after {self.retries + 1} tries "
                        f"({self.timeout_s:g} s each)")

    def _drain(self) -> None:
        """Drop replies that wait from before this request (stale frame errors, late replies);
        unsolicited pushes are kept."""
        while self._pump(0.0):
            pass
        self._ready.clear()

    def _take(self, seq: int):
        """The queued reply for seq, "resend" if the device reported a damaged frame, or None.
        Replies to other sequence numbers (late duplicates) are dropped."""
        while self._ready:
            msg = self._ready.popleft()
            if msg.get("seq") == seq:
                return msg
            if msg.get("seq") is None and msg.get("err") == "frame":
                return "resend"
        return None

    def next_push(self, timeout_s: float):
        """The next unsolicited message, or None if none arrives within timeout_s."""
        deadline = time.monotonic() + timeout_s
        while not self.pushes:
            left = deadline - time.monotonic()
            if left <= 0:
                return None
            self._pump(left)
        return self.pushes.popleft()

    def close(self) -> None:
        self.transport.close()
