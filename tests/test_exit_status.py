"""One exit-status convention for every command (docs/protocol.md, "Exit status"): 2 for bad
input or usage and for whatever the gateway answered with a refusal, 3 for a device or link that
does not answer. Each failure is one line on stderr, never a traceback."""
import os
import re

import pytest

from host_tools import errors
from host_tools.link import DeviceRefused
from host_tools.link.transport import PtyTransport
from tests.test_emulate import emulator, param_body, run_cli, sine_recording

KEY = b"brackwater site key, pumps P-101 and P-102"


_PROGRESS = re.compile(r"[\w ]+: \d+% \(\d+/\d+ \w+\)")   # host_tools.progress lines off a terminal


def _one_line(err):
    """One error line, besides progress lines written before the refusal came."""
    lines = [ln for ln in err.splitlines() if not _PROGRESS.fullmatch(ln)]
    return len(lines) == 1 and lines[0].startswith("edgevib: error: ")


def test_the_roots_carry_the_convention():
    assert errors.EdgevibError.exit_status == 2 and errors.LinkError.exit_status == 3
    for code, status in (("args", 2), ("refused", 2), ("auth", 2), ("missing", 2), ("unknown", 2),
                         ("decode", 2), ("fail", 3), ("frame", 3)):
        assert DeviceRefused("ack", code, "x").exit_status == status


def test_bad_input_exits_2(tmp_path, capsys):
    rec = sine_recording(tmp_path / "s.wav", seconds=0.5)
    cases = [
        (["train", str(tmp_path / "no-such-folder"), "--out", str(tmp_path / "p.msgpack")],
         "no-such-folder: no such recording or folder"),
        (["replay", str(tmp_path / "nothing.wav"), "--params", str(tmp_path / "p.msgpack")],
         "cannot read"),
        (["ack", "--port", str(tmp_path / "no-such-port")], "cannot open serial port"),
        (["ack", "--port", "serial:/dev/null?speed=9"], "unknown port option"),
        (["flash", str(rec), "--port", "loop:"], "not a MessagePack value"),
    ]
    for argv, says in cases:
        rc, out, err = run_cli(capsys, *argv)
        assert rc == 2 and _one_line(err) and says in err, (argv, err)
    with pytest.raises(SystemExit) as e:          # usage: argparse's own exit status is also 2
        run_cli(capsys, "ack")
    assert e.value.code == 2


def test_a_silent_port_exits_3_and_a_refusal_exits_2(tmp_path, capsys):
    silent = PtyTransport()                        # a port that exists, with nothing answering
    try:
        rc, out, err = run_cli(capsys, "ack", "--port", silent.port)
        assert rc == 3 and _one_line(err) and "no reply to ack" in err
    finally:
        silent.close()
    key = tmp_path / "site.key"
    key.write_bytes(KEY)
    with emulator(sine_recording(tmp_path / "s.wav", seconds=1.0), tmp_path / "state", speed=0,
                  key=KEY) as vg:
        assert vg.wait_until(vg.ended.is_set)
        rc, out, err = run_cli(capsys, "ack", "--port", vg.port)             # unsigned
        assert rc == 2 and _one_line(err) and "needs a signature" in err
        rc, out, err = run_cli(capsys, "learn", "--start", "--port", vg.port)
        assert rc == 2 and _one_line(err) and "needs a signature" in err
        rc, out, err = run_cli(capsys, "ack", "--port", vg.port, "--key-file", key)
        assert rc == 0 and out.startswith("no alarm was latched"), err
        (tmp_path / "v1.msgpack").write_bytes(param_body(1))
        rc, out, err = run_cli(capsys, "flash", tmp_path / "v1.msgpack", "--port", vg.port)
        assert rc == 2 and _one_line(err) and "signed" in err
        rc, out, err = run_cli(capsys, "flash", tmp_path / "v1.msgpack", "--port", vg.port,
                               "--key-file", key, "--bind")
        assert rc == 0 and "bound to this gateway" in out, err
        assert vg.gateway.params.params["gateway"] == vg.gateway_id
    assert os.path.exists(tmp_path / "state" / "gateway.id")
