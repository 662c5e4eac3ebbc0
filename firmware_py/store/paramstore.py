"""Parameter sets on the device filesystem, committed atomically, with the previous set kept.

Image (the file, and what the link carries):
  "EVP1"  flags(1: bit0 = signed)  body = MessagePack map  [HMAC-SHA256 of all before, 32]
  CRC-32 of all before, 4 bytes little-endian
The body holds at least version (int), board (str), fs_hz (int, Hz), n (window length,
samples) and axes (int, count); other keys belong to the detector and are passed through.

Files: CUR (the committed set), OLD (the one before, for rollback), NEW (staging during a
commit or rollback). Every step below is one file write or one rename/remove, and boot() turns
any state a power cut can leave into a valid set; the argument is in docs/protocol.md.
Uses only os.stat/os.rename/os.remove and open(), which MicroPython has. Not per-window code.

Entry points: ParamError, build_image(), rollback_message(), ParamStore."""
import os
from micropython import const
from firmware_py.codec import mpack
from firmware_py.codec.crc32 import crc32_into, crc32_ok
from firmware_py.codec.hmac_sha256 import hmac_sha256, digest_equal

MAGIC = b"EVP1"
FLAG_SIGNED = const(1)
_HEAD = const(5)      # magic + flags
_SIG = const(32)      # HMAC-SHA256 digest length
_CRC = const(4)
_REQUIRED = ("version", "board", "fs_hz", "n", "axes")


class ParamError(Exception):
    """A parameter set was refused or a store operation is not possible; str() is the reason."""


def build_image(body, key=None):
    """Wrap an encoded MessagePack map body into an image, signed if key is given (allocates)."""
    head = MAGIC + bytes([FLAG_SIGNED if key else 0])
    img = bytearray(head + bytes(body))
    if key:
        img += hmac_sha256(key, img)
    crc = bytearray(4)
    crc32_into(img, 0, len(img), crc, 0)
    return bytes(img + crc)


def rollback_message(from_version, to_version):
    """What a signed rollback signs: both versions, so the signature fits one rollback only."""
    return ("edgevib rollback %d %d" % (from_version, to_version)).encode()


def _le32(buf, end):
    """The 4 bytes before end as a little-endian int (a long int on small ports: allocates)."""
    return buf[end - 4] | (buf[end - 3] << 8) | (buf[end - 2] << 16) | (buf[end - 1] << 24)


def _exists(path):
    try:
        os.stat(path)
        return True
    except OSError:
        return False


def _remove(path):
    if _exists(path):
        os.remove(path)


class ParamStore:
    """The committed set (self.params, self.version, self.image) and the staging area.

    board, fs_hz, n, axes describe this gateway; a set built for others is refused. factory is
    the encoded MessagePack body used when no valid file exists (first boot); it must itself be
    a valid set for this gateway. key, if given, is
    the site key: only signed sets with a higher version are accepted, and rollback is signed.
    gateway_id (str), if given, names this gateway: a set whose body has a 'gateway' key runs only
    on the gateway of that id (the key is inside the signed body, so a signed set cannot be moved).
    """

    def __init__(self, root, board, fs_hz, n, axes, factory, key=None, cap=8192, gateway_id=None):
        self.cur = root + "/params.cur"
        self.old = root + "/params.old"
        self.new = root + "/params.new"
        self.bad = root + "/params.bad"   # a committed set that would not run, kept to inspect
        self.board = board
        self.fs_hz = fs_hz
        self.n = n
        self.axes = axes
        self.key = key
        self.gateway_id = gateway_id   # str naming this gateway; a set with 'gateway' must match
        self.cap = cap
        self._factory = build_image(factory)
        self._stage = bytearray(cap)
        self._staged = 0
        self._pending = None     # params of the staged image once verified
        self.params = None
        self.image = b""         # committed image; boot() always sets it
        self.source = None       # which file the running set came from: cur, new, old, factory
        self.trial = None        # trial(params): raise ValueError unless the set runs (param_check)
        self.boot()

    # ---- checking ----
    def check(self, img, n, strict):
        """Return the params of image img[0:n], or raise ParamError with the reason.

        strict adds the site-key rules (signature, version newer than the committed one).
        """
        if n < _HEAD + 1 + _CRC:
            raise ParamError("set is too short (%d bytes)" % n)
        if not crc32_ok(img, 0, n):
            raise ParamError("set CRC mismatch")
        if bytes(img[0:4]) != MAGIC:
            raise ParamError("not a parameter set (bad magic)")
        end = n - _CRC
        signed = img[4] & FLAG_SIGNED
        body_end = end - _SIG if signed else end
        if body_end <= _HEAD:
            raise ParamError("set is too short (%d bytes)" % n)
        if strict and self.key:
            if not signed:
                raise ParamError("this gateway accepts only signed sets")
            if not digest_equal(hmac_sha256(self.key, img[0:body_end]), img[body_end:end]):
                raise ParamError("signature does not match the site key")
        try:
            p = mpack.unpackb(img, _HEAD, body_end)
        except mpack.MpackError as e:
            raise ParamError("set body: " + str(e))
        if not isinstance(p, dict):
            raise ParamError("set body is not a map")
        for k in _REQUIRED:
            if k not in p:
                raise ParamError("set has no '%s'" % k)
            want = str if k == "board" else int
            if not isinstance(p[k], want) or p[k] is True or p[k] is False:
                raise ParamError("'%s' must be %s" % (k, "a str" if want is str else "an int"))
        if p["board"] != self.board:
            raise ParamError("set is for board '%s', this gateway is '%s'" % (p["board"], self.board))
        if p["fs_hz"] != self.fs_hz:
            raise ParamError("set is for %d Hz, this gateway samples at %d Hz" % (p["fs_hz"], self.fs_hz))
        if p["n"] != self.n:
            raise ParamError("set is for windows of %d samples, this gateway uses %d" % (p["n"], self.n))
        if p["axes"] != self.axes:
            raise ParamError("set is for %d axes, this gateway has %d" % (p["axes"], self.axes))
        g = p.get("gateway")
        if g is not None and g != self.gateway_id:
            raise ParamError("set is bound to gateway %s, this is %s" % (g, self.gateway_id))
        if strict and self.key and self.version is not None and p["version"] <= self.version:
            raise ParamError("version %d is not newer than committed %d" % (p["version"], self.version))
        return p

    def _load(self, path, strict):
        """(params, image) of a valid file, or None if missing or not valid."""
        try:
            size = os.stat(path)[6]
            if size > self.cap:
                return None
            with open(path, "rb") as f:
                img = f.read()
            return self.check(img, len(img), strict), img
        except (OSError, ParamError):
            return None

    def _adopt(self, got, source):
        self.params, self.image = got
        self.version = self.params["version"]
        self.source = source

    # ---- boot ----
    def boot(self):
        """Start on a valid set: CUR, else a complete NEW (commit cut short), else OLD, else
        the factory set. Repairs the files so CUR holds it; safe to cut and repeat."""
        self.version = None
        got = self._load(self.cur, False)
        if got:
            _remove(self.new)
            self._adopt(got, "cur")
            return self.params
        # A NEW file is only promoted if it passes every rule a commit applies.
        got = self._load(self.new, True)
        if got:
            _remove(self.cur)
            os.rename(self.new, self.cur)
            self._adopt(got, "new")
            return self.params
        got = self._load(self.old, False)
        if got:
            _remove(self.cur)
            _remove(self.new)
            os.rename(self.old, self.cur)
            self._adopt(got, "old")
            return self.params
        _remove(self.cur)
        _remove(self.new)
        self._adopt((self.check(self._factory, len(self._factory), False), self._factory), "factory")
        return self.params

    def quarantine(self):
        """Move the committed set aside (params.bad) and boot the one before it, or the
        factory set: for a set that passed every check and still failed on this gateway."""
        _remove(self.bad)
        if _exists(self.cur):
            os.rename(self.cur, self.bad)
        return self.boot()

    # ---- staging and commit ----
    def stage_write(self, off, data):
        """Append a chunk of an image; offset 0 starts a new one. Chunks must be contiguous."""
        if off == 0:
            self._staged = 0
        self._pending = None
        if off != self._staged:
            raise ParamError("chunk at offset %d, expected %d" % (off, self._staged))
        k = len(data)
        if off + k > self.cap:
            raise ParamError("set larger than %d bytes" % self.cap)
        self._stage[off:off + k] = data
        self._staged = off + k
        return self._staged

    def stage_verify(self, size):
        """Check the complete staged image of size bytes; return its params (not yet applied)."""
        self._pending = None
        if size != self._staged:
            raise ParamError("have %d bytes staged, expected %d" % (self._staged, size))
        p = self.check(self._stage, size, True)
        if self.trial is not None:
            try:
                self.trial(p)
            except ValueError as e:
                raise ParamError("set does not run on this gateway: " + str(e))
        self._pending = p
        return p

    def staged_crc(self):
        """CRC-32 trailer of the staged image, as an int."""
        return _le32(self._stage, self._staged)

    def crc(self):
        """CRC-32 trailer of the committed image, as an int."""
        return _le32(self.image, len(self.image))

    def _write(self, path, data):
        with open(path, "wb") as f:
            f.write(data)

    def commit(self):
        """Write NEW, read it back, then OLD <- CUR, CUR <- NEW. Returns the new params."""
        if self._pending is None:
            raise ParamError("nothing verified to commit")
        img = bytes(self._stage[0:self._staged])
        self._pending = None
        self._write(self.new, img)
        got = self._load(self.new, True)
        if got is None or got[1] != img:
            _remove(self.new)
            raise ParamError("written set did not read back intact")
        _remove(self.old)
        if _exists(self.cur):
            os.rename(self.cur, self.old)
        os.rename(self.new, self.cur)
        self._adopt(got, "cur")
        return self.params

    def previous_version(self):
        """Version of the set rollback would return to, or None."""
        got = self._load(self.old, False)
        return got[0]["version"] if got else None

    def rollback(self, sig=None):
        """Make OLD current and CUR the previous one, by three renames through NEW.

        With a site key, sig must be HMAC-SHA256 of rollback_message(current, previous).
        """
        got = self._load(self.old, False)
        if got is None or self.source == "factory":
            raise ParamError("no previous set to roll back to")
        if self.key:
            msg = rollback_message(self.version, got[0]["version"])
            if sig is None or not digest_equal(hmac_sha256(self.key, msg), sig):
                raise ParamError("rollback needs a signature from the site key")
        _remove(self.new)
        os.rename(self.cur, self.new)
        os.rename(self.old, self.cur)
        os.rename(self.new, self.old)
        self._adopt(got, "cur")
        return self.params

    def read(self, off, k):
        """Bytes [off, off+k) of the committed image (for the host to read it back)."""
        return self.image[off:off + k]
