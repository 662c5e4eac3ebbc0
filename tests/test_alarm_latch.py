"""A latched, unacknowledged alarm survives a new set, a rollback, a reboot and a power cut, and
clears only by acknowledgement (docs/engineer.md; firmware_py/store/latch.py).

The alarm comes from a recording whose second half is in ISO 10816-3 zone D (12 mm/s r.m.s.,
tests/test_emulate.py fault_recording): an alarm on any table of that standard.
"""
import os

import pytest

import firmware_py  # noqa: F401
from firmware_py.detect import alarm
from firmware_py.store.latch import LatchFile
from host_tools.link import Client
from tests.test_emulate import emulator, fault_recording, param_body, run_cli, sine_recording


def _set(path, version, **changes):
    path.write_bytes(param_body(version, **changes))
    return path


def _state(port):
    c = Client.open(port)
    try:
        return c.status()["state"]
    finally:
        c.close()


def test_flash_rollback_reboot_and_power_cut_keep_the_latched_alarm(tmp_path, capsys):
    state = tmp_path / "state"
    # 30 s of zone D: longer than the factory set's hold-off and 10 s persistence span
    with emulator(fault_recording(tmp_path / "f.wav", seconds=60.0), state, speed=0) as vg:
        assert vg.wait_until(vg.ended.is_set)          # the recording is fed; the gateway idles, in alarm
        assert vg.gateway.det.state == alarm.ALARM
        reason = vg.gateway.det.alarm.reason
        assert reason == alarm.R_ISO_D and LatchFile(str(state / "alarm.latch")).load() == reason
        # flash: a set with higher thresholds must not hide it
        for v in (1, 2):
            rc, _, err = run_cli(capsys, "flash", _set(tmp_path / f"v{v}.msgpack", v,
                                                        det_thr_alert_q8=40 * 256,
                                                        det_thr_alarm_q8=60 * 256), "--port", vg.port)
            assert rc == 0, err
            assert _state(vg.port) == "alarm"
        rc, _, err = run_cli(capsys, "rollback", "--port", vg.port)
        assert rc == 0, err
        assert _state(vg.port) == "alarm"
        c = Client.open(vg.port)
        try:
            c.reboot()
            assert vg.wait_until(lambda: vg.boots == 2)
            assert c.status()["state"] == "alarm"
        finally:
            c.close()
    # power cut: a new emulator on the same files, now fed a healthy recording long enough for
    # the alarm's clear conditions (factory set: 1 s steady and 5 s hold-off, a full 20 s span,
    # and the 60 s dwell: 80 s is enough)
    with emulator(sine_recording(tmp_path / "s.wav", seconds=80.0), state, speed=0) as vg:
        assert vg.wait_until(vg.ended.is_set)
        assert vg.gateway.windows > 0 and _state(vg.port) == "alarm"
        assert vg.gateway.det.alarm.reason == reason
        rc, out, _ = run_cli(capsys, "ack", "--port", vg.port)
        assert rc == 0 and out.startswith("alarm acknowledged")
        assert LatchFile(str(state / "alarm.latch")).load() == 0
    with emulator(sine_recording(tmp_path / "s.wav", seconds=1.0), state, speed=0) as vg:
        assert vg.wait_until(vg.ended.is_set)
        assert _state(vg.port) != "alarm"              # acknowledged stays acknowledged


@pytest.mark.parametrize("cut", ["tmp-half-written", "after-tmp", "after-remove", "after-rename"])
def test_a_power_cut_at_any_step_of_saving_keeps_the_old_or_the_new_latch(tmp_path, cut):
    f = LatchFile(str(tmp_path / "alarm.latch"))
    f.save(alarm.R_ISO_D)
    # replay save(0) step by step, stopping where the power goes
    if cut == "tmp-half-written":
        (tmp_path / "alarm.latch.tmp").write_text("latched 0")
        assert f.load() == alarm.R_ISO_D
        return
    (tmp_path / "alarm.latch.tmp").write_text("latched 0 end\n")
    if cut == "after-tmp":
        assert f.load() == alarm.R_ISO_D
        return
    os.remove(tmp_path / "alarm.latch")
    if cut == "after-remove":
        assert f.load() == 0
        return
    os.rename(tmp_path / "alarm.latch.tmp", tmp_path / "alarm.latch")
    assert f.load() == 0


def test_a_missing_or_damaged_state_file_latches_nothing(tmp_path):
    f = LatchFile(str(tmp_path / "alarm.latch"))
    assert f.load() == 0
    (tmp_path / "alarm.latch").write_text("latched x end\n")
    assert f.load() == 0
