"""One client per port: a second command on a busy port gets one line and exit 2, the lock goes
with its holder however it ends, and the holder's work is not disturbed."""
import os
import signal
import subprocess
import sys

import pytest

from host_tools.link import Client
from host_tools.link.port_lock import PortBusy, PortLock, lock_path
from tests.test_emulate import REPO, emulator, param_body, run_cli, sine_recording


@pytest.fixture
def idle(tmp_path):
    with emulator(sine_recording(tmp_path / "s.wav", seconds=2.0), tmp_path / "state", speed=0) as vg:
        assert vg.wait_until(vg.ended.is_set)
        yield vg


def test_a_second_client_is_refused_with_the_holder_named(idle, tmp_path, capsys):
    c = Client.open(idle.port)
    try:
        (tmp_path / "v1.msgpack").write_bytes(param_body(1))
        for argv in (["ack"], ["monitor", "--once"], ["flash", tmp_path / "v1.msgpack"],
                     ["record", "--seconds", "1", "--out", tmp_path / "r.wav"]):
            rc, out, err = run_cli(capsys, *argv, "--port", idle.port)
            assert rc == 2 and out == "" and err.count("\n") == 1, (argv, err)
            assert f"port {idle.port} in use by pid {os.getpid()}" in err
        with pytest.raises(PortBusy):
            Client.open(idle.port)
        assert c.identify()["param_version"] == 0          # the holder is undisturbed
        assert not (tmp_path / "r.wav").exists()
    finally:
        c.close()
    rc, out, err = run_cli(capsys, "monitor", "--once", "--port", idle.port)   # free again
    assert rc == 0, err


def test_the_lock_goes_with_a_killed_holder(idle, capsys):
    # a monitor in another process holds the port; kill -9 it and the port is free at once
    proc = subprocess.Popen([sys.executable, "-m", "host_tools.cli", "monitor", "--port", idle.port],
                            cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        # its first update line (a blocking read: it ends with that line, or at end of file if
        # the monitor exited) comes after it took the lock
        assert proc.stdout.readline(), proc.stderr.read()
        assert proc.poll() is None and "monitor" in open(lock_path(idle.port)).read()
        rc, out, err = run_cli(capsys, "ack", "--port", idle.port)
        assert rc == 2 and "in use by pid %d: edgevib monitor" % proc.pid in err
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    rc, out, err = run_cli(capsys, "ack", "--port", idle.port)
    assert rc == 0 and out.startswith("no alarm was latched"), err


def test_lock_file_names_are_safe_and_release_is_idempotent(tmp_path):
    p = lock_path("serial:/dev/ttyACM0?baud=9600")
    assert os.path.dirname(p) and "/" not in os.path.basename(p) and "?" not in p
    lk = PortLock(str(tmp_path / "x")).acquire()
    lk.release()
    lk.release()
    PortLock(str(tmp_path / "x")).acquire().release()
