"""The virtual gateway behaves as the board does when the gateway raises (reports it, keeps
serving), and `monitor` follows a change of the set while it runs."""
import re

import msgpack

import firmware_py  # noqa: F401
from firmware_py.run import params as params_mod
from firmware_py.store.paramstore import build_image
from host_tools.link import Client
from host_tools.twin.virtual_gateway import VirtualGateway
from tests.test_emulate import PROFILE, run_cli, sine_recording


def test_a_gateway_exception_is_reported_and_the_emulator_keeps_serving(tmp_path, capsys):
    vg = VirtualGateway(sine_recording(tmp_path / "s.wav", seconds=3.0), PROFILE, tmp_path / "state",
                        speed=0)

    def fault(*args):
        raise IndexError("injected fault in the window path")
    vg.gateway.det.step = fault          # this gateway's next window raises
    vg.start()
    try:
        assert vg.wait_until(vg.ended.is_set)
        assert vg.faults == ["IndexError: injected fault in the window path"]
        assert "the gateway raised IndexError: injected fault" in capsys.readouterr().err
        c = Client.open(vg.port)
        try:
            assert c.identify()["param_source"] == "factory"
            assert c.status()["windows"] > 0          # the restarted gateway ran the rest
        finally:
            c.close()
        assert vg.boots == 2
    finally:
        vg.stop()


def test_monitor_refreshes_its_header_when_the_set_changes(tmp_path, capsys):
    vg = VirtualGateway(sine_recording(tmp_path / "s.wav", seconds=2.0), PROFILE, tmp_path / "state",
                        speed=0, loop=True)
    p = params_mod.factory(PROFILE)
    p.update(version=7, det_thr_alert_q8=9 * 256)
    img = build_image(msgpack.packb(p))
    feed = vg._feed_block
    seen = [0]

    def feed_then_commit():
        # in the emulator's own thread, as a set committed over the board's second link would be
        gw = vg.gateway
        if gw.streaming:
            seen[0] += 1
            if seen[0] == 40:
                gw.params.stage_write(0, img)
                gw.params.stage_verify(len(img))
                gw.apply_params(gw.params.commit())
        return feed()
    vg._feed_block = feed_then_commit
    vg.start()
    try:
        rc, out, err = run_cli(capsys, "monitor", "--port", vg.port, "--updates", "30")
    finally:
        vg.stop()
    assert rc == 0, err
    sets = re.findall(r" set=v(\d+) ", out)
    assert len(sets) == 30 and sets[0] == "0" and sets[-1] == "7", out
    assert sets == sorted(sets, key=int)          # once changed, never shown stale again
