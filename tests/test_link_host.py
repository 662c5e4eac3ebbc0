import hmac
import threading

import pytest

import firmware_py  # noqa: F401
from firmware_py.store.paramstore import ParamStore, build_image
from firmware_py.link.service import Service
from firmware_py.store.snapshots import SnapshotRing, parse
from tests.captures import save_capture
from host_tools.errors import EdgevibError, LinkError
from host_tools.link import Client, DeviceRefused, Link, open_transport
from host_tools.link.transport import PtyTransport, memory_pair
from tests.test_service import BOARD, FakeGateway, body

KEY = b"brackwater site key 01"


def device(root, key=None):
    ps = ParamStore(str(root), factory=body(0), key=key, cap=4096, **BOARD)
    return FakeGateway(ps, SnapshotRing(str(root), 4, BOARD["fs_hz"], BOARD["n"], BOARD["axes"]))


def in_memory(root, key=None, timeout_s=0.2, drop_replies=0):
    """A client wired to a Service in this thread; the first drop_replies replies are lost."""
    host, dev = memory_pair()
    gw = device(root, key)
    lost = [drop_replies]

    def send(frame):
        if lost[0] > 0:
            lost[0] -= 1
            return
        dev.write(frame)

    svc = Service(gw, send, 1024, 1024)
    dev.on_data = svc.receive
    return Client(Link(host, timeout_s=timeout_s, retries=2)), gw, svc


def test_every_command_in_memory(tmp_path):
    c, gw, svc = in_memory(tmp_path)
    info = c.identify()
    assert info["board"] == "p101-gw" and info["param_version"] == 0
    assert c.status()["state"] == "alert"
    c.stream(True)
    c.learn(True)
    c.set_clock(1_780_000_000)
    assert gw.streaming and gw.learning and gw.clock == 1_780_000_000
    assert c.acknowledge() is True and c.acknowledge() is False
    assert c.capture() == gw.raw                      # 1536 bytes over several chunks
    save_capture(gw.snapshots, "alarm", 9, [1, 2, 3], bytes(range(256)) * 6)
    [e] = c.event_list()
    meta, raw = parse(c.event_read(e["id"]))
    assert meta["kind"] == "alarm" and raw == bytes(range(256)) * 6
    img = build_image(body(3, pad=bytes(1500)))
    seen = []
    c.param_write(img, progress=lambda done, total: seen.append(done), chunk=500)
    assert seen == [500, 1000, 1500, len(img)]
    assert c.param_verify(len(img))["version"] == 3
    assert c.param_commit() == 3 and c.param_read() == img
    c.reboot()
    assert gw.reboots == 1


def test_device_refusal_is_a_link_error_with_code(tmp_path):
    c, gw, svc = in_memory(tmp_path)
    img = build_image(body(3, board="p102-gw"))
    c.param_write(img)
    with pytest.raises(DeviceRefused, match="param_verify: set is for board 'p102-gw'") as e:
        c.param_verify(len(img))
    assert e.value.code == "refused" and isinstance(e.value, LinkError)


def test_lost_reply_is_retried_and_not_executed_twice(tmp_path):
    c, gw, svc = in_memory(tmp_path, drop_replies=1)
    assert c.acknowledge() is True          # first reply lost; the retry gets the cached one
    assert c.link.frames_sent == 2 and svc.frames_in == 2
    assert gw.latched is False


def test_no_reply_times_out(tmp_path):
    c, gw, svc = in_memory(tmp_path, timeout_s=0.05, drop_replies=10)
    with pytest.raises(LinkError, match="no reply to status after 3 tries"):
        c.status()


def test_transport_names():
    loop = open_transport("loop:")
    loop.write(b"abc")
    assert loop.read(10, 0.1) == b"abc" and loop.read(10, 0.01) == b""
    # bad port names are bad input (exit 2, docs/protocol.md "Exit status"), not a link failure
    with pytest.raises(EdgevibError, match="unknown port option 'speed=9'") as e:
        open_transport("serial:/dev/null?speed=9")
    assert not isinstance(e.value, LinkError) and e.value.exit_status == 2
    with pytest.raises(EdgevibError, match="cannot open serial port /nonexistent/tty"):
        open_transport("/nonexistent/tty")


class PtyDevice:
    """The service on the device end of a pseudo-terminal, in a thread, with the fake gateway."""

    def __init__(self, root, key=None):
        self.pty = PtyTransport()
        self.gw = device(root, key)
        self.svc = Service(self.gw, self.pty.write, 1024, 1024)
        self._stop = threading.Event()
        self._t = threading.Thread(target=self._run, daemon=True)
        self._t.start()

    def _run(self):
        while not self._stop.is_set():
            data = self.pty.read(4096, 0.02)
            if data:
                self.svc.receive(data)

    def close(self):
        self._stop.set()
        self._t.join()
        self.pty.close()


def test_end_to_end_over_pty_with_pyserial(tmp_path):
    dev = PtyDevice(tmp_path)
    c = Client.open(dev.pty.port, timeout_s=1.0)       # pyserial on the pty's other end
    try:
        v1 = build_image(body(1, pad=bytes(range(256)) * 4))
        c.param_write(v1, chunk=300)
        assert c.param_verify(len(v1))["crc"] == int.from_bytes(v1[-4:], "little")
        assert c.param_commit() == 1
        assert c.param_read() == v1 and dev.gw.applied == [1]
        # A cut mid-write: the host stops after two chunks and the device loses power.
        v2 = build_image(body(2, pad=bytes(range(255, -1, -1)) * 4))
        c.param_write(v2[:600], chunk=300)
        with pytest.raises(DeviceRefused, match="have 600 bytes staged"):
            c.param_verify(len(v2))
        with pytest.raises(DeviceRefused, match="nothing verified"):
            c.param_commit()
    finally:
        c.close()
        dev.close()
    rebooted = PtyDevice(tmp_path)
    c = Client.open(rebooted.pty.port)
    try:
        info = c.identify()
        assert info["param_version"] == 1 and c.param_read() == v1
        c.param_write(v2)
        c.param_verify(len(v2))
        assert c.param_commit() == 2
        assert c.identify()["param_previous"] == 1
        assert c.rollback() == 1 and c.param_read() == v1
        rebooted.svc.push(rebooted.gw.status())
        assert c.link.next_push(1.0)["push"] == "features"
    finally:
        c.close()
        rebooted.close()


def test_signed_rollback_over_the_link(tmp_path):
    c, gw, svc = in_memory(tmp_path, key=KEY)
    for v in (1, 2):
        img = build_image(body(v), KEY)
        c.param_write(img)
        c.param_verify(len(img))
        c.param_commit()
    with pytest.raises(DeviceRefused, match="signature"):
        c.rollback()
    with pytest.raises(DeviceRefused, match="signature"):
        c.rollback(b"wrong key")
    # A signature made by hand with CPython's hmac over the message docs/protocol.md defines.
    sig = hmac.new(KEY, b"edgevib rollback 2 1", "sha256").digest()
    assert c.link.request("rollback", sig=sig)["version"] == 1
    assert c.identify()["param_version"] == 1
    c.param_write(build_image(body(3), KEY))
    c.param_verify(len(build_image(body(3), KEY)))
    c.param_commit()
    assert c.rollback(KEY) == 1                       # the client signs for itself


def test_stale_frame_errors_after_line_noise_do_not_use_up_the_tries(tmp_path):
    # 2 kB of line noise with a 00 every 20 bytes: the device answers each damaged frame with a
    # frame error (seq nil), about 100 of them, which wait at the host before its next request
    c, gw, svc = in_memory(tmp_path)
    noise = bytes((i * 37 + 11) % 255 + 1 if i % 20 else 0 for i in range(2041))   # ends on 00
    c.link.transport.write(noise)
    assert svc.errors >= 100
    assert c.acknowledge() is True and c.acknowledge() is False     # two runs, both answered
    assert c.link.frames_sent == 2                                  # no try used up by the noise


def test_frame_errors_during_a_request_are_resent_without_using_a_try(tmp_path):
    c, gw, svc = in_memory(tmp_path, timeout_s=0.05)
    dev_send = svc.write
    damaged = [0]

    def noisy(frame):                  # 4 frames damaged in a row: more than the 3 tries
        if damaged[0] < 4:
            damaged[0] += 1
            dev_send(svc._encode({"seq": None, "ok": False, "err": "frame", "msg": "frame CRC mismatch"}))
            return
        dev_send(frame)
    svc.write = noisy
    assert c.status()["state"] == "alert"
