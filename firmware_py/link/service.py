"""The device command handler: request frames in, reply frames out (docs/protocol.md).

A request is one frame whose payload is a MessagePack map {seq: int, cmd: str, ...args}; the
reply names the seq: {seq, ok: true, ...results} or {seq, ok: false, err: code, msg: text}.
Frames that fail COBS, CRC, size or decoding get an error reply with seq nil. Nothing a peer
sends makes an exception escape receive(). A request repeated with the same bytes (a host retry
after a lost reply) gets the cached reply and is not executed twice.

The gateway object this handler drives must provide:

  attributes
    params     firmware_py.store.paramstore.ParamStore: the committed set and the staging area
    snapshots  firmware_py.store.snapshots.SnapshotRing: the event captures (list, size, read)
  methods (results are plain dicts/lists/ints/str/bytes; none may block for long)
    info()            -> {fw: str, board: str, fs_hz: int, n: int, axes: int,
                          analyse_every: int, uptime_s: int, heap_free: int}
    status()          -> {state: str, mode: int, features: [int], windows: int,
                          dropped: int, skipped: int, events: int, ...}
    stream(on)        start (True) or stop (False) pushing a features message per window
    raw_stream(on)    -> int: start/stop pushing each window's raw counts; the next window's index
    apply_params(p)   run the detector on params dict p (called after commit and rollback)
    acknowledge()     -> bool: clear a latched alarm; True if one was latched
    learn(on)         start (True) or stop (False) learning this pump's normal
    capture()         -> bytes: the latest raw window, int16 little-endian counts, axis-major
    set_clock(t)      set the wall clock to t (int, seconds since 1970-01-01 UTC)
    request_reboot()  reset once the reply has been sent (must not reset inside the call)

While streaming, the gateway calls push(msg) with a dict (for example its status()) to send
an unsolicited {push: "features", ...} frame, and push_data("raw", fields, blob) to send a blob
too large for one frame as {push: "raw", ...fields, total, off, data} chunks. Handling a request and push() allocate (dicts,
strings, the reply copy): call them from the main loop, outside heap-locked per-window code.

Entry points: Service.
"""
from micropython import const
from firmware_py.link import frames
from firmware_py.codec import mpack
from firmware_py.store.paramstore import ParamError
from firmware_py.link import auth
from firmware_py.dsp.counters import sat_add

_ERR_TEXT = {
    frames.ERR_COBS: "frame is not valid COBS",
    frames.ERR_CRC: "frame CRC mismatch",
    frames.ERR_SIZE: "frame larger than the receive buffer",
    frames.ERR_SHORT: "frame too short",
}
_MARGIN = const(96)   # reply bytes besides a data chunk (seq, ok, total, off, keys)
_INT_MAX = const(0x3FFFFFFF)   # int arguments: small ints on a board unless a command says
_T_MAX = 0xFFFFFFFF            # clock: seconds since 1970 up to 2106 (a big int: not per window)


class _ArgError(Exception):
    pass


class _Missing(Exception):
    pass


def _arg(req, name, kind, default=None, lo=0, hi=_INT_MAX):
    """req[name] checked against kind (int, str, bool or bytes), an int also against lo..hi;
    default if optional."""
    if name not in req:
        if default is not None:
            return default
        raise _ArgError("missing argument '%s'" % name)
    v = req[name]
    if kind is bool:
        ok = v is True or v is False
    elif kind is int:
        ok = isinstance(v, int) and not (v is True or v is False)
    else:
        ok = isinstance(v, kind)
    if not ok:
        raise _ArgError("argument '%s' must be %s" % (name, kind.__name__))
    if kind is int and not lo <= v <= hi:
        raise _ArgError("argument '%s' must be from %d to %d" % (name, lo, hi))
    return v


class Service:
    """Handle requests for gateway; write(frame_bytes) sends one frame on the link."""

    def __init__(self, gateway, write, max_request=1024, max_reply=2048):
        self.gw = gateway
        self.write = write
        self.rx = frames.Receiver(max_request)
        self._tx = bytearray(max_reply + 4)      # 4 spare bytes for the CRC
        self._out = mpack.Writer(self._tx, max_reply)
        self._wire = bytearray(frames.wire_size(max_reply))
        self.chunk = max_reply - _MARGIN          # largest data chunk a read returns
        self._last_req = None
        self._last_reply = None
        self._raw = None                          # capture being read out
        self.auth = auth.Auth(gateway.params.key)  # signed commands when a site key is held
        self.frames_in = 0
        self.errors = 0
        self._cmds = {
            "identify": self._identify, "status": self._status, "stream": self._stream,
            "param_read": self._param_read, "param_write": self._param_write,
            "param_verify": self._param_verify, "param_commit": self._param_commit,
            "rollback": self._rollback, "ack": self._ack, "learn": self._learn,
            "event_list": self._event_list, "event_read": self._event_read,
            "capture": self._capture, "clock": self._clock, "reboot": self._reboot,
            "raw": self._raw_stream,
        }

    # ---- bytes in, frames out ----
    def receive(self, data, n=-1):
        """Feed n bytes of data (all if n < 0) from the link; replies go out through write."""
        if n < 0:
            n = len(data)
        rx = self.rx
        for i in range(n):
            k = rx.push(data[i])
            if k > 0:
                self._request(k)
            elif k < 0:
                self.errors = sat_add(self.errors, 1)
                self._send({"seq": None, "ok": False, "err": "frame", "msg": _ERR_TEXT[k]})

    def push(self, msg, kind="features"):
        """Send an unsolicited message: msg (a dict) plus {push: kind}."""
        m = dict(msg)
        m["push"] = kind
        self._send(m)

    def push_data(self, kind, msg, blob):
        """Push bytes blob in frames that fit the reply buffer: each is msg plus {push: kind,
        total: len(blob), off, data: at most self.chunk bytes}, in order."""
        total = len(blob)
        off = 0
        while off < total:
            m = dict(msg)
            m["push"] = kind
            m["total"] = total
            m["off"] = off
            m["data"] = blob[off:off + self.chunk]
            self._send(m)
            off += self.chunk

    def _encode(self, msg):
        w = self._out
        w.reset()
        try:
            w.pack(msg)
        except mpack.MpackError as e:
            w.reset()
            w.pack({"seq": msg.get("seq"), "ok": False, "err": "fail",
                    "msg": "reply not sent: " + str(e)})
        k = frames.encode(self._tx, w.pos, self._wire)
        return bytes(self._wire[0:k])

    def _send(self, msg):
        frame = self._encode(msg)
        self.write(frame)
        return frame

    def _request(self, k):
        self.frames_in = sat_add(self.frames_in, 1)
        req_bytes = bytes(self.rx.buf[0:k])
        if req_bytes == self._last_req:
            self.write(self._last_reply)
            return
        reply = self._handle(req_bytes)
        self._last_req = req_bytes
        self._last_reply = self._send(reply)

    def _handle(self, payload):
        """The reply dict for one request payload; never raises."""
        seq = None
        try:
            req = mpack.unpackb(payload)
            if not isinstance(req, dict):
                return self._err(None, "decode", "request is not a map")
            seq = req.get("seq")
            if not isinstance(seq, int) or seq is True or seq is False:
                return self._err(None, "decode", "request has no int 'seq'")
            cmd = req.get("cmd")
            fn = self._cmds.get(cmd) if isinstance(cmd, str) else None
            if fn is None:
                return self._err(seq, "unknown", "unknown command %s" % repr(cmd))
            self.auth.check(cmd, req)
            r = fn(req)
            if self.auth.key and cmd in auth.SIGNED:
                r["nonce"] = self.auth.nonce      # the challenge for the next signed command
            r["seq"] = seq
            r["ok"] = True
            return r
        except mpack.MpackError as e:
            return self._err(seq, "decode", str(e))
        except _ArgError as e:
            return self._err(seq, "args", str(e))
        except ParamError as e:
            return self._err(seq, "refused", str(e))
        except _Missing as e:
            return self._err(seq, "missing", str(e))
        except auth.AuthError as e:
            return self._err(seq, "auth", str(e))
        except Exception as e:   # a gateway fault must still produce a reply
            return self._err(seq, "fail", type(e).__name__ + ": " + str(e))

    def _err(self, seq, code, text):
        self.errors = sat_add(self.errors, 1)
        return {"seq": seq, "ok": False, "err": code, "msg": text}

    def _span(self, req):
        """(off, len) of the chunk a read request asks for; len at most self.chunk."""
        off = _arg(req, "off", int, 0)
        k = _arg(req, "len", int, self.chunk)
        return off, (k if k < self.chunk else self.chunk)

    def _chunk(self, req, blob, total):
        off, k = self._span(req)
        return {"total": total, "off": off, "data": bytes(blob[off:off + k])}

    # ---- commands ----
    def _identify(self, req):
        r = self.gw.info()
        ps = self.gw.params
        r["param_version"] = ps.version
        r["param_crc"] = ps.crc()
        r["param_source"] = ps.source
        r["param_previous"] = ps.previous_version()
        r["gateway_id"] = ps.gateway_id
        r["nonce"] = self.auth.nonce
        r["signed"] = bool(ps.key)               # True: the commands in auth.SIGNED need a sig
        return r

    def _status(self, req):
        return self.gw.status()

    def _stream(self, req):
        self.gw.stream(_arg(req, "on", bool))
        return {}

    def _raw_stream(self, req):
        return {"w": self.gw.raw_stream(_arg(req, "on", bool))}

    def _param_read(self, req):
        img = self.gw.params.image
        return self._chunk(req, img, len(img))

    def _param_write(self, req):
        return {"staged": self.gw.params.stage_write(_arg(req, "off", int), _arg(req, "data", bytes))}

    def _param_verify(self, req):
        ps = self.gw.params
        p = ps.stage_verify(_arg(req, "size", int))
        return {"version": p["version"], "crc": ps.staged_crc()}

    def _param_commit(self, req):
        p = self.gw.params.commit()
        self.gw.apply_params(p)
        return {"version": p["version"]}

    def _rollback(self, req):
        sig = req.get("sig")
        if sig is not None and not isinstance(sig, bytes):
            raise _ArgError("argument 'sig' must be bytes")
        p = self.gw.params.rollback(sig)
        self.gw.apply_params(p)
        return {"version": p["version"]}

    def _ack(self, req):
        return {"latched": bool(self.gw.acknowledge())}

    def _learn(self, req):
        self.gw.learn(_arg(req, "on", bool))
        return {}

    def _event_list(self, req):
        return {"events": self.gw.snapshots.list()}

    def _event_read(self, req):
        sid = _arg(req, "id", int)
        snaps = self.gw.snapshots
        total = snaps.size(sid)
        off, k = self._span(req)
        data = None if total is None else snaps.read(sid, off, k)    # only this chunk from flash
        if data is None:
            raise _Missing("no event %d" % sid)
        return {"total": total, "off": off, "data": data}

    def _capture(self, req):
        if _arg(req, "off", int, 0) == 0 or self._raw is None:
            self._raw = bytes(self.gw.capture())
        return self._chunk(req, self._raw, len(self._raw))

    def _clock(self, req):
        self.gw.set_clock(_arg(req, "t", int, None, 0, _T_MAX))
        return {}

    def _reboot(self, req):
        self.gw.request_reboot()
        return {}
