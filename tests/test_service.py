import random

import msgpack
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

import firmware_py  # noqa: F401
from firmware_py.link import frames
from firmware_py.store.paramstore import ParamStore, build_image
from firmware_py.link.service import Service
from firmware_py.store.snapshots import SnapshotRing
from tests.captures import save_capture
from host_tools.twin.mpy_guest import run_guest
from tests.engines import ENGINES

BOARD = dict(board="p101-gw", fs_hz=3200, n=256, axes=3)

# A tiny fake gateway for tests only (the real one is the application). Plain MicroPython-safe
# code: the same source runs under CPython here and in the MicroPython guest.
FAKE_GATEWAY = '''
class FakeGateway:
    def __init__(self, params, snapshots):
        self.params = params
        self.snapshots = snapshots
        self.streaming = False
        self.learning = False
        self.latched = True
        self.clock = 0
        self.applied = []
        self.reboots = 0
        self.raw = bytes(range(256)) * 6

    def info(self):
        return {"fw": "0.1.0", "board": self.params.board, "fs_hz": self.params.fs_hz,
                "n": self.params.n, "axes": self.params.axes, "uptime_s": 42,
                "heap_free": 123456}

    def status(self):
        return {"state": "alert", "mode": 1, "features": [256, -3, 70000],
                "windows": 10, "dropped": 0, "events": 0}

    def stream(self, on):
        self.streaming = on

    def apply_params(self, p):
        self.applied.append(p["version"])

    def acknowledge(self):
        was = self.latched
        self.latched = False
        return was

    def learn(self, on):
        self.learning = on

    def capture(self):
        return self.raw

    def set_clock(self, t):
        self.clock = t

    def request_reboot(self):
        self.reboots += 1
'''
_ns: dict = {}
exec(FAKE_GATEWAY, _ns)
FakeGateway = _ns["FakeGateway"]


def body(version, **over):
    p = dict(BOARD, version=version, bands=[10, 1000])
    p.update(over)
    return msgpack.packb(p, use_bin_type=True)


def make(root, key=None):
    ps = ParamStore(str(root), factory=body(0), key=key, cap=4096, **BOARD)
    gw = FakeGateway(ps, SnapshotRing(str(root), 4, BOARD["fs_hz"], BOARD["n"], BOARD["axes"]))
    out = []
    return Service(gw, out.append, max_request=1024, max_reply=1024), gw, out


def frame(payload: bytes) -> bytes:
    buf = bytearray(payload) + bytearray(4)
    out = bytearray(frames.wire_size(len(payload)))
    return bytes(out[:frames.encode(buf, len(payload), out)])


def req(seq, cmd, **args):
    return frame(msgpack.packb({"seq": seq, "cmd": cmd, **args}, use_bin_type=True))


def replies(out):
    """Decode reply frames with an independent path: split on 00, msgpack for the payload."""
    rx = frames.Receiver(4096)
    got = []
    for f in out:
        for b in f:
            k = rx.push(b)
            assert k >= 0
            if k:
                got.append(msgpack.unpackb(bytes(rx.buf[:k]), raw=False))
    return got


def call(svc, out, data):
    out.clear()
    svc.receive(data)
    return replies(out)


def test_identify_and_status(tmp_path):
    svc, gw, out = make(tmp_path)
    [r] = call(svc, out, req(1, "identify"))
    assert r["seq"] == 1 and r["ok"] is True
    assert r["board"] == "p101-gw" and r["param_version"] == 0 and r["param_source"] == "factory"
    assert r["param_crc"] == int.from_bytes(gw.params.image[-4:], "little")
    [r] = call(svc, out, req(2, "status"))
    assert r["state"] == "alert" and r["features"] == [256, -3, 70000]


def test_flash_sequence_and_readback(tmp_path):
    svc, gw, out = make(tmp_path)
    img = build_image(body(7))
    for off in range(0, len(img), 20):
        [r] = call(svc, out, req(10 + off, "param_write", off=off, data=img[off:off + 20]))
        assert r["ok"], r
    [r] = call(svc, out, req(100, "param_verify", size=len(img)))
    assert r["version"] == 7 and r["crc"] == int.from_bytes(img[-4:], "little")
    assert gw.applied == []                        # verified is not applied
    [r] = call(svc, out, req(101, "param_commit"))
    assert r["version"] == 7 and gw.applied == [7]
    got = b""
    while True:
        [r] = call(svc, out, req(200 + len(got), "param_read", off=len(got), len=30))
        got += r["data"]
        if len(got) >= r["total"]:
            break
    assert got == img
    [r] = call(svc, out, req(300, "rollback"))
    assert r["ok"] is False and "no previous" in r["msg"]     # the factory set is not a file
    img8 = build_image(body(8))
    call(svc, out, req(301, "param_write", off=0, data=img8))
    call(svc, out, req(302, "param_verify", size=len(img8)))
    call(svc, out, req(303, "param_commit"))
    [r] = call(svc, out, req(304, "rollback"))
    assert r["ok"] and r["version"] == 7 and gw.applied == [7, 8, 7]


def test_errors_are_replies(tmp_path):
    svc, gw, out = make(tmp_path)
    cases = [
        (req(5, "levitate"), 5, "unknown"),
        (req(6, "stream"), 6, "args"),
        (req(7, "stream", on=1), 7, "args"),
        (req(8, "param_verify", size=3), 8, "refused"),
        (req(9, "param_commit"), 9, "refused"),
        (req(10, "event_read", id=3), 10, "missing"),
        (frame(msgpack.packb([1, 2])), None, "decode"),
        (frame(msgpack.packb({"cmd": "status"})), None, "decode"),
        (frame(b"\xc1"), None, "decode"),
        (frame(b"\x82\xa3seq\x05"), None, "decode"),          # truncated map
        (b"\x05\x11\x22\x00", None, "frame"),
        (bytes(range(1, 256)) * 8 + b"\x00", None, "frame"),   # oversize
    ]
    for data, seq, err in cases:
        [r] = call(svc, out, data)
        assert r["ok"] is False and r["seq"] == seq and r["err"] == err, (r, err)
        assert isinstance(r["msg"], str) and r["msg"]


def test_unencodable_gateway_result_is_an_error_reply(tmp_path):
    svc, gw, out = make(tmp_path)
    gw.status = lambda: {"state": "normal", "score": 1.5}          # floats are not device values
    [r] = call(svc, out, req(1, "status"))
    assert r == {"seq": 1, "ok": False, "err": "fail",
                 "msg": "reply not sent: mpack: cannot encode float"}
    gw.status = lambda: {"state": "normal", 3: 1}
    [r] = call(svc, out, req(2, "status"))
    assert r["err"] == "fail" and "all str or all int" in r["msg"]
    gw.acknowledge = lambda: 1 / 0
    [r] = call(svc, out, req(3, "ack"))
    assert r["err"] == "fail" and r["msg"].startswith("ZeroDivisionError")


def test_retry_gets_cached_reply_without_running_twice(tmp_path):
    svc, gw, out = make(tmp_path)
    a = call(svc, out, req(3, "ack"))
    b = call(svc, out, req(3, "ack"))
    assert a == b and a[0]["latched"] is True
    [c] = call(svc, out, req(4, "ack"))
    assert c["latched"] is False


def test_commands_reach_the_gateway(tmp_path):
    svc, gw, out = make(tmp_path)
    call(svc, out, req(1, "stream", on=True))
    call(svc, out, req(2, "learn", on=True))
    call(svc, out, req(3, "clock", t=1_780_000_000))
    call(svc, out, req(4, "reboot"))
    assert gw.streaming and gw.learning and gw.clock == 1_780_000_000 and gw.reboots == 1
    got = b""
    while True:
        [r] = call(svc, out, req(10 + len(got), "capture", off=len(got)))
        got += r["data"]
        if len(got) >= r["total"]:
            break
    assert got == gw.raw
    save_capture(gw.snapshots, "alarm", 5, [1, 2], bytes(BOARD["n"] * 6))
    [r] = call(svc, out, req(50, "event_list"))
    assert r["events"][0]["kind"] == "alarm"
    out.clear()
    svc.push(gw.status())
    [p] = replies(out)
    assert p["push"] == "features" and p["state"] == "alert"


# ---- fuzzing ----
CMDS = ["identify", "status", "stream", "param_read", "param_write", "param_verify",
        "param_commit", "rollback", "ack", "learn", "event_list", "event_read", "capture",
        "clock", "reboot", "bogus"]
arg_values = st.none() | st.booleans() | st.integers(-2**40, 2**40) | st.binary(max_size=40) \
    | st.text(max_size=10) | st.lists(st.integers(-2**63, 2**63), max_size=3)
FRAMES_TRIED = [0]


@pytest.fixture(scope="module", autouse=True)
def _report_fuzz_count():
    yield
    print(f"\ncommand handler fuzz: {FRAMES_TRIED[0]} frames tried in total")


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.tuples(st.sampled_from(CMDS),
                          st.dictionaries(st.sampled_from(["off", "len", "data", "size", "on",
                                                           "id", "t", "sig", "seq"]),
                                          arg_values, max_size=4),
                          st.integers(0, 5)), max_size=25),
       st.randoms(use_true_random=False))
def test_fuzz_handler_no_exception_no_partial_apply(tmp_path_factory, reqs, rnd):
    root = tmp_path_factory.mktemp("fz")
    svc, gw, out = make(root)
    valid = {0: build_image(body(0))}
    img = build_image(body(9))
    valid[9] = img
    for seq, (cmd, args, mutate) in enumerate(reqs):
        if cmd == "param_write" and rnd.random() < 0.5:     # often a real chunk of a real set
            off = rnd.randrange(0, len(img))
            args = {"off": off, "data": img[off:off + rnd.randrange(1, 40)]}
        data = bytearray(req(seq, cmd, **args) if "seq" not in args else
                         frame(msgpack.packb({"cmd": cmd, **args}, use_bin_type=True)))
        for _ in range(mutate):                                # mutated frames
            i = rnd.randrange(len(data))
            data[i] = rnd.randrange(256)
        FRAMES_TRIED[0] += 1
        svc.receive(bytes(data) + b"\x00")
    for r in replies(out):
        assert isinstance(r, dict) and ("ok" in r)
    # Only complete, valid sets ever reached the detector, and the store boots to one.
    assert all(v in valid for v in gw.applied)
    assert gw.params.image in valid.values()
    again = ParamStore(str(root), factory=body(0), cap=4096, **BOARD)
    assert again.image in valid.values()


def test_fuzz_flash_with_mutated_chunks(tmp_path):
    # Seeded: a full flash where each chunk frame may be damaged on the wire; a set is applied
    # only if every byte arrived (the host's CRC check and the device's verify must agree).
    rng = random.Random(7)
    img = build_image(body(11, pad=bytes(range(256))))
    tried = applied = 0
    for trial in range(60):
        root = tmp_path / f"t{trial}"
        root.mkdir()
        svc, gw, out = make(root)
        for off in range(0, len(img), 64):
            f = bytearray(req(off + 1, "param_write", off=off, data=img[off:off + 64]))
            if rng.random() < 0.05:
                f[rng.randrange(len(f) - 1)] ^= 1 << rng.randrange(8)
            svc.receive(bytes(f))
            tried += 1
        svc.receive(req(9000, "param_verify", size=len(img)))
        svc.receive(req(9001, "param_commit"))
        tried += 2
        if gw.applied:
            applied += 1
            assert gw.applied == [11] and gw.params.image == img
        else:
            assert gw.params.version == 0
    FRAMES_TRIED[0] += tried
    print(f"seeded flash fuzz: {tried} frames, {applied}/60 flashes applied")
    assert 0 < applied < 60


def test_fuzz_random_byte_streams(tmp_path):
    # Seeded: random bytes, random valid-CRC frames of random payloads, and random MessagePack
    # maps; every reply must be a well-formed frame with a MessagePack map.
    rng = random.Random(11)
    svc, gw, out = make(tmp_path)
    tried = 0
    for _ in range(3000):
        kind = rng.randrange(3)
        if kind == 0:
            data = bytes(rng.randrange(256) for _ in range(rng.randrange(1, 60))) + b"\x00"
        elif kind == 1:
            data = frame(bytes(rng.randrange(256) for _ in range(rng.randrange(1, 60))))
        else:
            m = {rng.choice(["seq", "cmd", "off", "data", "x"]): rng.choice(
                [rng.randrange(-99, 99), rng.choice(CMDS), b"\x00\x01", None, [1], {"a": 1}])
                for _ in range(rng.randrange(1, 5))}
            data = frame(msgpack.packb(m, use_bin_type=True))
        svc.receive(data)
        tried += 1
    got = replies(out)
    assert got and all(isinstance(r, dict) and "ok" in r for r in got)
    assert gw.applied == [] and gw.params.version == 0
    FRAMES_TRIED[0] += tried
    print(f"random stream fuzz: {tried} frames, {len(got)} replies")


# ---- same bytes under MicroPython ----
def canned(img):
    return [req(1, "identify"), req(2, "status"), req(3, "stream", on=True),
            req(4, "param_read", off=0, len=40), req(5, "param_write", off=0, data=img[:30]),
            req(6, "param_write", off=30, data=img[30:]), req(7, "param_verify", size=len(img)),
            req(8, "ack"), req(8, "ack"), req(9, "ack"), req(10, "learn", on=False),
            req(11, "clock", t=1_780_000_000), req(12, "capture", off=0, len=100),
            req(13, "capture", off=1500, len=200), req(14, "event_list"),
            req(15, "event_read", id=3), req(16, "fly"), frame(msgpack.packb([1])),
            frame(b"\x81\xa3seq"), b"\x07garbage\x00", req(17, "param_verify", size=5),
            req(18, "param_write", off=99, data=b"x"), req(19, "reboot"),
            req(2**31, "status"), req(-5, "status")]


GUEST_SETUP = FAKE_GATEWAY + '''
from firmware_py.store.paramstore import ParamStore
from firmware_py.store.snapshots import SnapshotRing
from firmware_py.link.service import Service
ps = ParamStore("/nonexistent-edgevib", "p101-gw", 3200, 256, 3, FACTORY, None, 4096)
gw = FakeGateway(ps, SnapshotRing("/nonexistent-edgevib", 4, 3200, 256, 3))
out = []
svc = Service(gw, out.append, 1024, 1024)
'''


@ENGINES
def test_micropython_replies_byte_identical(run):
    img = build_image(body(7))
    reqs = canned(img)
    ps = ParamStore("/nonexistent-edgevib", factory=body(0), cap=4096, **BOARD)
    gw = FakeGateway(ps, SnapshotRing("/nonexistent-edgevib", 4, 3200, 256, 3))
    out = []
    svc = Service(gw, out.append, 1024, 1024)
    host = []
    for f in reqs:
        out.clear()
        svc.receive(f)
        host.append(b"".join(out).hex())
    res = run(GUEST_SETUP.replace("FACTORY", repr(body(0))) + f'''
for f in {[f.hex() for f in reqs]!r}:
    out.clear()
    svc.receive(bytes.fromhex(f))
    emit("".join(o.hex() for o in out))
''')
    assert res.out == host
    assert all(h for h in host)


def test_fuel_per_frame_on_micropython():
    n = 20
    setup = GUEST_SETUP.replace("FACTORY", repr(body(0)))
    frames_hex = [req(i + 1, "status").hex() for i in range(n)]
    base = run_guest(setup + f"fs = {frames_hex!r}\nfs = [bytes.fromhex(f) for f in fs]\n")
    res = run_guest(setup + f"fs = {frames_hex!r}\nfs = [bytes.fromhex(f) for f in fs]\n"
                    "for f in fs:\n    svc.receive(f)\nemit(len(out))\n")
    assert res.out == [n]
    per = (res.fuel - base.fuel) // n
    print(f"MicroPython fuel per status request/reply: {per}")
    assert per > 0
