"""`edgevib ack` and `edgevib learn` end to end through pyserial on the virtual gateway's pty."""
from tests.test_emulate import emulator, fault_recording, run_cli, sine_recording


def test_ack_reports_an_alarm_whose_cause_persists(tmp_path, capsys):
    # the recording ends in ISO zone D (12 mm/s) for 30 s, more than the factory set's 10 s
    # persistence span after its hold-off: an alarm on any table of ISO 10816-3
    with emulator(fault_recording(tmp_path / "f.wav", seconds=60.0), tmp_path / "state", speed=0) as vg:
        assert vg.wait_until(vg.ended.is_set)
        assert vg.gateway.det.state == 2                      # alarm, latched
        rc, out, err = run_cli(capsys, "ack", "--port", vg.port)
        assert rc == 0 and err == ""
        assert "cause is still present" in out
        rc, out, _ = run_cli(capsys, "learn", "--start", "--port", vg.port)
        assert rc == 2 and out == ""                          # refused while the alarm holds


def test_ack_without_alarm_and_learning_start_stop(tmp_path, capsys):
    with emulator(sine_recording(tmp_path / "s.wav", seconds=3.0), tmp_path / "state", speed=0) as vg:
        assert vg.wait_until(vg.ended.is_set)
        rc, out, _ = run_cli(capsys, "ack", "--port", vg.port)
        assert rc == 0 and out.startswith("no alarm was latched")
        rc, out, _ = run_cli(capsys, "learn", "--start", "--port", vg.port)
        assert rc == 0 and out == "learning started\n"
        assert vg.gateway.det.learning
        rc, out, _ = run_cli(capsys, "learn", "--stop", "--port", vg.port)
        assert rc == 0 and out.startswith("learning stopped")
        assert not vg.gateway.det.learning
        rc, out, _ = run_cli(capsys, "learn", "--stop", "--port", vg.port)   # again: not learning
        assert rc == 0 and out.startswith("the gateway was not learning")


def test_learn_needs_start_or_stop(capsys):
    import pytest
    with pytest.raises(SystemExit) as e:
        run_cli(capsys, "learn", "--port", "/dev/null")
    assert e.value.code == 2
