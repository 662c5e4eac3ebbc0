"""The virtual gateway: the real firmware_py Gateway and Service on a pseudo-terminal, fed from a
recording; its clock, reboot, power cuts on the state folder, the raw stream's gap accounting,
and the `edgevib emulate` command as a separate process."""
import os
import signal
import subprocess
import sys
from contextlib import contextmanager
from pathlib import Path

import msgpack
import numpy as np
import pytest

import firmware_py  # noqa: F401
from firmware_py.run import params as params_mod
from firmware_py.store.paramstore import build_image
from host_tools import cli
from host_tools.data import demo_scenario as ds
from host_tools.errors import EdgevibError, LinkError
from host_tools.link import Client
from host_tools.data.recording import read_recording, write_wav
from host_tools.data.units import STANDARD_GRAVITY_M_S2
from host_tools.twin import virtual_gateway
from host_tools.twin.virtual_gateway import VirtualGateway, load_profile

REPO = Path(__file__).resolve().parent.parent
PROFILE = load_profile(None)                 # boards/desk.json
FS = PROFILE["sample_rate_hz"]
N = PROFILE["window_n"]
CPG = PROFILE["sensor"]["counts_per_g"]
M_S2_PER_COUNT = STANDARD_GRAVITY_M_S2 / CPG
T0 = 1_772_409_600.0                          # 2026-03-02 00:00:00 UTC, the demo's invented start
# Per axis: sine amplitude (counts) and frequency (Hz); z also carries +1 g of gravity. 50 and
# 100 Hz fall on whole FFT bins (fs / n = 6.25 Hz), so the window sees each sine without leakage.
SINES = ((20, 50.0), (12, 100.0), (16, 50.0))


def sine_recording(path, seconds=4.0, t0=T0):
    """Pure sines (SINES) at the desk board's scale, written as WAV + sidecar."""
    t = np.arange(int(seconds * FS)) / FS
    x = np.stack([a * np.sin(2 * np.pi * f * t) for a, f in SINES], axis=1)
    x[:, 2] += CPG
    return write_wav(path, np.rint(x).astype(np.int16), FS, {"m_s2_per_unit": M_S2_PER_COUNT, "t0_s": t0})


def fault_recording(path, seconds=6.0):
    """Invented demo data (pump P-101, day 41.5, running) whose second half carries a loud added
    1x imbalance, 12 mm/s r.m.s. at 1480 r/min: ISO 10816-3 zone D, an alarm on any table."""
    sc = ds.build_scenario()
    snap = ds.Snapshot("P-101", sc.start_t0_s + 41.5 * 86400, seconds)
    c = ds.synthesize(sc, snap).astype(np.int64)
    t = np.arange(len(c)) / ds.FS_HZ
    half = len(c) // 2
    f1 = 1480 / 60
    amp = 12e-3 * np.sqrt(2) * 2 * np.pi * f1 / ds.M_S2_PER_COUNT   # velocity r.m.s. -> accel peak, counts
    c[half:, 0] += np.rint(amp * np.cos(2 * np.pi * f1 * t[half:])).astype(np.int64)
    return write_wav(path, np.clip(c, ds.ADC_MIN, ds.ADC_MAX).astype(np.int16), ds.FS_HZ,
                     ds.snapshot_sidecar(sc, snap))


@contextmanager
def emulator(recording, state_dir, **kw):
    """A VirtualGateway running in a thread; stopped (a power cut) on leaving."""
    vg = VirtualGateway(recording, PROFILE, state_dir, **kw).start()
    try:
        yield vg
    finally:
        vg.stop()


def run_cli(capsys, *argv):
    """Run `edgevib ARGV` in this process: (exit status, stdout, stderr)."""
    capsys.readouterr()
    rc = cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


def param_body(version, **changes):
    """A valid parameter set body for the desk board (the factory set, renumbered), as bytes."""
    p = params_mod.factory(PROFILE)
    p["version"] = version
    p.update(changes)
    return msgpack.packb(p)


def test_windows_and_clock_follow_the_recording(tmp_path):
    rec = sine_recording(tmp_path / "s.wav", seconds=2.0)
    with emulator(rec, tmp_path / "state", speed=0) as vg:
        assert vg.wait_until(vg.ended.is_set)
        c = Client.open(vg.port)
        try:
            st = c.status()
            info = c.identify()
        finally:
            c.close()
    frames = int(2.0 * FS)
    assert st["windows"] == frames // N and st["dropped"] == 0       # every full window, none lost
    assert st["t_s"] == int(T0 + frames / FS)                          # the clock is the recording's
    assert info["uptime_s"] == frames // FS and info["board"] == "desk"


def test_real_time_pacing(tmp_path):
    """The feed keeps to real time x speed on the pacing clock, never ahead of it, and catches up
    in bounded bursts when behind. The clock is the test's (times half a block period off every
    due time, so float rounding of the sums cannot move a block across one)."""
    rec = sine_recording(tmp_path / "s.wav", seconds=2.0)
    vg = VirtualGateway(rec, PROFILE, tmp_path / "state", speed=4.0)
    try:
        block = PROFILE["fifo_watermark"]
        period = block / (FS * 4.0)               # clock seconds per FIFO block at 4 x real time
        vg._due = 0.0                             # as run() starts it: the first block is due now
        for j in range(50):
            wait = vg._pace((j + 0.5) * period)
            assert vg.fed == (j + 1) * block      # exactly the blocks due by then
            assert wait == pytest.approx(0.5 * period)   # until the next one is due
        # 100 periods late: at most _CATCH_UP blocks a turn, with no wait, until caught up
        late = (150 + 0.5) * period
        turns = 0
        while vg.fed < 151 * block:
            before = vg.fed
            wait = vg._pace(late)
            turns += 1
            assert vg.fed - before <= virtual_gateway._CATCH_UP * block
        assert vg.fed == 151 * block and wait == pytest.approx(0.5 * period)
        assert turns == -(-101 // virtual_gateway._CATCH_UP)   # ceil(101 blocks / 32 a turn)
    finally:
        vg.stop()


def test_reboot_rebuilds_from_the_store(tmp_path):
    rec = sine_recording(tmp_path / "s.wav", seconds=2.0)
    with emulator(rec, tmp_path / "state", speed=0) as vg:
        assert vg.wait_until(vg.ended.is_set)
        c = Client.open(vg.port)
        try:
            img = build_image(param_body(5))
            c.param_write(img)
            c.param_verify(len(img))
            c.param_commit()
            c.reboot()
            assert vg.wait_until(lambda: vg.boots == 2)
            info = c.identify()
            assert info["param_version"] == 5 and info["param_source"] == "cur"
            assert info["uptime_s"] == 0 and c.status()["windows"] == 0    # a fresh gateway
            assert c.param_read() == img
        finally:
            c.close()


def test_power_cut_mid_upload_keeps_the_old_set(tmp_path):
    rec = sine_recording(tmp_path / "s.wav", seconds=1.0)
    state = tmp_path / "state"
    v1 = build_image(param_body(1))
    with emulator(rec, state, speed=0) as vg:
        c = Client.open(vg.port)
        c.param_write(v1)
        c.param_verify(len(v1))
        c.param_commit()
        v2 = build_image(param_body(2, det_thr_alert_q8=4 * 256))
        c.param_write(v2[:512], chunk=256)          # two chunks of three, then the power goes
        c.close()
    with emulator(rec, state, speed=0) as vg:       # power back on, same files
        c = Client.open(vg.port)
        try:
            info = c.identify()
            assert info["param_version"] == 1 and info["param_source"] == "cur"
            assert c.param_read() == v1
            assert vg.gateway.det.thr_alert_q8 == 5 * 256      # the detector runs the old set
        finally:
            c.close()


def test_site_key_is_held_by_the_virtual_gateway(tmp_path):
    rec = sine_recording(tmp_path / "s.wav", seconds=1.0)
    key = b"brackwater site key P-101"
    with emulator(rec, tmp_path / "state", speed=0, key=key) as vg:
        c = Client.open(vg.port)
        try:
            c.param_write(build_image(param_body(1)))
            with pytest.raises(LinkError, match="accepts only signed sets"):
                c.param_verify(len(build_image(param_body(1))))
            img = build_image(param_body(1), key)
            c.param_write(img)
            assert c.param_verify(len(img))["version"] == 1
        finally:
            c.close()


def test_raw_stream_marks_frames_lost_to_a_full_ring(tmp_path):
    """Feed past a full ring: the window after the lost frames reports exactly how many."""
    from firmware_py.run.gateway import Gateway
    from firmware_py.store.paramstore import ParamStore
    from firmware_py.store.snapshots import SnapshotRing

    store = ParamStore(str(tmp_path), "desk", FS, N, 3, param_body(0))
    gw = Gateway(PROFILE, store, SnapshotRing(str(tmp_path), 2, FS, N, 3), lambda: 0)
    pushed = []

    class Svc:
        chunk = 4096

        def push_data(self, kind, msg, blob):
            pushed.append((msg["w"], msg["gap"], bytes(blob)))

    gw.service = Svc()
    gw.raw_stream(True)
    x = np.arange(6 * N * 3, dtype=np.int64).reshape(-1, 3) % 4000
    src = np.ascontiguousarray(x, dtype=np.int16)
    slots = PROFILE["ring_windows"]
    gw.feed(src[:(slots + 1) * N].ravel(), (slots + 1) * N)     # one window more than the ring holds
    gw.poll()
    gw.feed(src[(slots + 1) * N:].ravel(), len(src) - (slots + 1) * N)
    gw.poll()
    assert [(w, gap) for w, gap, _ in pushed] == [(0, 0), (1, 0), (2, N), (3, 0)]
    # window 2 starts where the samples resumed: frame (slots + 1) * N of the source
    got = np.frombuffer(pushed[2][2], "<i2").reshape(3, N).T
    assert np.array_equal(got, src[(slots + 1) * N:(slots + 2) * N])


def test_bad_recording_is_one_clear_error(tmp_path):
    with pytest.raises(EdgevibError, match="no such file"):
        VirtualGateway(tmp_path / "none.wav", PROFILE, tmp_path / "state")
    odd = write_wav(tmp_path / "fast.wav", np.zeros((1000, 3), np.int16), 4000, {"m_s2_per_unit": M_S2_PER_COUNT})
    with pytest.raises(EdgevibError, match="does not match the expected 3200 Hz"):
        VirtualGateway(odd, PROFILE, tmp_path / "state")
    mono = write_wav(tmp_path / "mono.wav", np.zeros((1000, 1), np.int16), FS, {"m_s2_per_unit": M_S2_PER_COUNT})
    with pytest.raises(EdgevibError, match="1 axes, board desk has 3"):
        VirtualGateway(mono, PROFILE, tmp_path / "state")


def test_emulate_command_bad_input(tmp_path, capsys):
    rc, out, err = run_cli(capsys, "emulate", "--recording", tmp_path / "none.wav")
    assert rc == 2 and out == "" and err.count("\n") == 1 and "no such file" in err
    rec = sine_recording(tmp_path / "s.wav", seconds=0.5)
    rc, out, err = run_cli(capsys, "emulate", "--recording", rec, "--speed", "-1")
    assert rc == 2 and err.count("\n") == 1 and "--speed" in err


def _line(stream, says):
    """Read lines of a child's stream until one holds `says` (blocking reads: they end with that
    line or at end of file, when the child has exited); the line, or "" if the child ended."""
    for line in stream:
        if says in line:
            return line.strip()
    return ""


def _emulate(rec, state):
    return subprocess.Popen([sys.executable, "-m", "host_tools.cli", "emulate", "--recording", str(rec),
                             "--speed", "0", "--state-dir", str(state)],
                            cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def test_emulate_process_answers_monitor_and_survives_a_kill_mid_flash(tmp_path, capsys):
    rec = sine_recording(tmp_path / "s.wav", seconds=2.0)
    state = tmp_path / "state"
    proc = _emulate(rec, state)
    try:
        port = _line(proc.stdout, "/")
        assert os.path.exists(port), proc.stderr.read()
        # the emulator says on stderr when the recording has played to its end
        assert _line(proc.stderr, "played to its end"), "emulate ended early"
        rc, out, err = run_cli(capsys, "monitor", "--port", port, "--once")
        assert rc == 0 and "windows=12 " in out                     # 2 s = 12 whole windows, all fed
        (tmp_path / "v1.msgpack").write_bytes(param_body(1))
        rc, out, err = run_cli(capsys, "flash", tmp_path / "v1.msgpack", "--port", port)
        assert rc == 0 and "flashed version 1" in out
        # Power cut in the middle of an upload: kill -9 after the first of four chunks.
        v2 = build_image(param_body(2))
        c = Client.open(port, timeout_s=0.3, retries=0)
        with pytest.raises(LinkError):
            c.param_write(v2, chunk=256, progress=lambda done, total: proc.kill())
        c.close()
        proc.wait()
        assert proc.returncode == -signal.SIGKILL
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.wait()
    proc = _emulate(rec, state)
    try:
        port = _line(proc.stdout, "/")
        rc, out, err = run_cli(capsys, "monitor", "--port", port, "--once")
        assert rc == 0
        c = Client.open(port)
        try:
            assert c.identify()["param_version"] == 1
            assert c.param_read() == build_image(param_body(1))
        finally:
            c.close()
        proc.send_signal(signal.SIGTERM)
        assert proc.wait() == 0
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.wait()


def test_gap_accounting_allocates_nothing_on_micropython():
    """feed() past a full ring and window() after it, each under heap_lock on MicroPython; the
    window also goes into the event capture's history (3 windows before a trigger, 2 after)."""
    import json

    from host_tools.twin.mpy_guest import run_guest
    res = run_guest("""
import array, json
from firmware_py.codec import mpack
from firmware_py.run import params
from firmware_py.run.gateway import Gateway
from firmware_py.store.paramstore import ParamStore
from firmware_py.store.snapshots import SnapshotRing
prof = json.loads(%(profile)r)
n = prof['window_n']
store = ParamStore('/nonexistent-edgevib', 'desk', 3200, n, 3, mpack.packb(params.factory(prof), 4096))
gw = Gateway(prof, store, SnapshotRing('/nonexistent-edgevib', 2, 3200, n, 3, 3, 2), lambda: 0)
src = array.array('h', [((k * 37) %% 2001) - 1000 for k in range(48)])
def feed():
    gw.feed(src, 16)
    return 0
def window():
    return gw.window()
ok = True
gaps = []
for rounds in (3, 1):
    for b in range(rounds * n // 16):
        ok = locked(feed)[0] and ok
    while True:
        done, ran = locked(window)
        ok = ok and done
        if not ran:
            break
        gaps.append(gw.raw_gap)
emit([ok, gaps, gw.core.ring.dropped, gw.snapshots.have])
""" % {"profile": json.dumps(PROFILE)})
    ok, gaps, dropped, have = res.out[0]
    assert ok, "feed or window allocated under heap_lock"
    assert gaps == [0, 0, N] and dropped == N     # a third window did not fit; the next one says so
    assert have == 1                              # the capture's history restarted at that gap


def test_loop_repeats_the_recording(tmp_path):
    rec = sine_recording(tmp_path / "s.wav", seconds=1.0)
    with emulator(rec, tmp_path / "state", speed=0, loop=True) as vg:
        assert vg.wait_until(lambda: vg.gateway.windows >= 20)
        assert vg.ended.is_set() and vg.fed > 3 * FS       # past the end more than twice
        assert vg.gateway.core.ring.dropped == 0


def test_emulate_command_leaves_the_signal_handlers_as_it_found_them(tmp_path, capsys):
    before = [signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)]
    run_cli(capsys, "emulate", "--recording", tmp_path / "none.wav")
    assert [signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)] == before
