"""A keyed gateway: unsigned or replayed state changes are refused, signed ones run once; every
command argument is range-checked; a signed set can be bound to one gateway.

The signature is HMAC-SHA256 (RFC 2104); the host side here computes it with Python's own
`hmac` module, an implementation independent of the device's firmware_py/codec/hmac_sha256.py.
"""
import hmac

import pytest

import firmware_py  # noqa: F401
from firmware_py.link import auth
from firmware_py.store.paramstore import ParamStore, build_image
from firmware_py.link.service import Service
from firmware_py.store.snapshots import SnapshotRing
from host_tools.link import Client, Link
from host_tools.link.transport import memory_pair
from tests.test_service import BOARD, FakeGateway, body, call, make, req

KEY = b"brackwater-site-key-0001"
# every command in auth.SIGNED with arguments a host would send
SIGNED_REQUESTS = {"reboot": {}, "clock": {"t": 1_780_000_000}, "learn": {"on": True}, "ack": {},
                   "stream": {"on": True}, "raw": {"on": False}, "capture": {"off": 0},
                   "event_read": {"id": 0}}


def sign(key, cmd, nonce, args):
    return hmac.new(key, auth.message(cmd, nonce, args), "sha256").digest()


def nonce_of(svc, out, seq):
    [r] = call(svc, out, req(seq, "identify"))
    assert r["signed"] is True and len(r["nonce"]) == 16
    return r["nonce"]


def test_the_signed_set_is_the_documented_one():
    assert set(auth.SIGNED) == set(SIGNED_REQUESTS)


@pytest.mark.parametrize("cmd", sorted(SIGNED_REQUESTS))
def test_keyed_gateway_refuses_every_unsigned_or_badly_signed_state_change(tmp_path, cmd):
    svc, gw, out = make(tmp_path, key=KEY)
    args = SIGNED_REQUESTS[cmd]
    before = (gw.streaming, gw.learning, gw.latched, gw.clock, gw.reboots)
    [r] = call(svc, out, req(1, cmd, **args))
    assert r["ok"] is False and r["err"] == "auth" and "signature" in r["msg"]
    nonce = nonce_of(svc, out, 2)
    bad = sign(b"another-site-key-000000", cmd, nonce, args)
    [r] = call(svc, out, req(3, cmd, sig=bad, **args))
    assert r["ok"] is False and r["err"] == "auth"
    # signed over the right nonce but for other arguments (the signature covers them)
    if args:
        name = sorted(args)[0]
        other = dict(args, **{name: (not args[name]) if isinstance(args[name], bool) else args[name] + 1})
        [r] = call(svc, out, req(4, cmd, sig=sign(KEY, cmd, nonce, other), **args))
        assert r["ok"] is False and r["err"] == "auth"
    assert (gw.streaming, gw.learning, gw.latched, gw.clock, gw.reboots) == before


def test_a_signed_command_runs_once_and_its_replay_is_refused(tmp_path):
    svc, gw, out = make(tmp_path, key=KEY)
    nonce = nonce_of(svc, out, 1)
    frame = req(2, "ack", sig=sign(KEY, "ack", nonce, {}))
    [r] = call(svc, out, frame)
    assert r["ok"] and r["latched"] is True and r["nonce"] != nonce
    # the same bytes again are a host retry: the cached reply, the command not run again
    [again] = call(svc, out, frame)
    assert again == r
    # the captured command under a new seq (a replay) is refused: its nonce is spent
    [r] = call(svc, out, req(3, "ack", sig=sign(KEY, "ack", nonce, {})))
    assert r["ok"] is False and r["err"] == "auth"
    # and so after a reboot (a new Service: a new random nonce)
    svc2 = Service(gw, out.append, max_request=1024, max_reply=1024)
    [r] = call(svc2, out, req(4, "ack", sig=sign(KEY, "ack", nonce, {})))
    assert r["ok"] is False and r["err"] == "auth"


def test_unkeyed_gateway_and_reading_commands_need_no_signature(tmp_path):
    svc, gw, out = make(tmp_path)
    [r] = call(svc, out, req(1, "ack"))
    assert r["ok"]
    svc, gw, out = make(tmp_path / "k", key=KEY)
    for i, cmd in enumerate(("identify", "status", "event_list", "param_read")):
        [r] = call(svc, out, req(10 + i, cmd))
        assert r["ok"], r


def test_the_host_signs_when_it_holds_the_key(tmp_path):
    root = tmp_path / "gw"
    root.mkdir()
    ps = ParamStore(str(root), factory=body(0), key=KEY, cap=4096, **BOARD)
    gw = FakeGateway(ps, SnapshotRing(str(root), 4, BOARD["fs_hz"], BOARD["n"], BOARD["axes"]))
    host, dev = memory_pair()
    svc = Service(gw, dev.write, max_request=1024, max_reply=1024)
    dev.on_data = svc.receive
    c = Client(Link(host, timeout_s=0.2, retries=0, key=KEY))
    assert c.acknowledge() is True
    c.learn(True)
    c.set_clock(1_780_000_001)
    c.stream(True)
    assert gw.learning and gw.clock == 1_780_000_001 and gw.streaming
    # another client (no key) cannot; a second keyed client spends the nonce, the first refetches
    nokey = Client(Link(host, timeout_s=0.2, retries=0))
    with pytest.raises(Exception, match="needs a signature"):
        nokey.learn(False)
    other = Client(Link(host, timeout_s=0.2, retries=0, key=KEY))
    other.learn(False)
    c.learn(True)
    assert gw.learning


# ---- argument ranges (item: clock 2**64 - 1 crashed the window path at the next event) ----

@pytest.mark.parametrize("cmd, args", [
    ("clock", {"t": 2 ** 64 - 1}), ("clock", {"t": -1}), ("clock", {"t": 2 ** 32}),
    ("event_read", {"id": -1}), ("event_read", {"id": 2 ** 40}),
    ("param_read", {"off": -5}), ("param_read", {"len": 2 ** 31}), ("capture", {"off": 2 ** 63}),
    ("param_write", {"off": 2 ** 40, "data": b"x"}), ("param_verify", {"size": -1}),
])
def test_out_of_range_arguments_are_refused(tmp_path, cmd, args):
    svc, gw, out = make(tmp_path)
    [r] = call(svc, out, req(1, cmd, **args))
    assert r["ok"] is False and r["err"] == "args" and "must be from" in r["msg"]
    assert gw.clock == 0


def test_clock_accepts_its_whole_range(tmp_path):
    svc, gw, out = make(tmp_path)
    for t in (0, 1_780_000_000, 2 ** 32 - 1):
        [r] = call(svc, out, req(t % 1000 + 1, "clock", t=t))
        assert r["ok"] and gw.clock == t


# ---- binding a signed set to one gateway ----

def test_a_set_bound_to_gateway_a_is_refused_by_gateway_b_with_the_same_key(tmp_path):
    import msgpack
    stores = {}
    for gid in ("a1b2c3", "d4e5f6"):
        (tmp_path / gid).mkdir()
        stores[gid] = ParamStore(str(tmp_path / gid), factory=body(0), key=KEY, cap=4096,
                                 gateway_id=gid, **BOARD)
    p = msgpack.unpackb(body(5), raw=False)
    p["gateway"] = "a1b2c3"
    img = build_image(msgpack.packb(p), KEY)
    for gid, ps in stores.items():
        ps.stage_write(0, img)
        if gid == "a1b2c3":
            assert ps.stage_verify(len(img))["version"] == 5
        else:
            with pytest.raises(Exception, match="bound to gateway a1b2c3, this is d4e5f6"):
                ps.stage_verify(len(img))
