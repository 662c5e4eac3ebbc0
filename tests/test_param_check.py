"""A parameter set is proven to run before anything commits it (firmware_py/run/param_check.py):
on the device in the store's verify step and at boot, on the host in flash, deploy and replay;
a fuzzer over parameter sets finds none that the store commits and the window path then crashes.

The sets are the factory set with keys changed; the reference for "runs" is the real gateway
taking whole windows of a signal after the commit, which is what a board does.
"""
import array

import msgpack
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

import firmware_py  # noqa: F401
from firmware_py.codec import mpack
from firmware_py.detect import detector
from firmware_py.run import board, param_check, params as params_mod
from firmware_py.run.gateway import Gateway
from firmware_py.store.paramstore import ParamError, ParamStore, build_image
from firmware_py.store.snapshots import SnapshotRing
from host_tools import cli
from tests.test_emulate import REPO, emulator, sine_recording

DESK = board.load(str(REPO / "boards" / "desk.json"))
PICO = board.load(str(REPO / "boards" / "pico_adxl345.json"))


def desk_set(**changes):
    p = params_mod.factory(DESK)
    p.update(changes)
    return p


def crashing_axes(profile=DESK):
    """The issue's set: det_axes 8 with matching per-axis lists (IndexError in _sensor_bad)."""
    p = params_mod.factory(profile)
    axial = [k for k, v in p.items() if k.startswith("det_") and isinstance(v, list)
             and len(v) == profile["axes"] and k != "det_iso_bounds"]     # one entry per axis
    p["det_axes"] = 8
    for k in axial:
        p[k] = p[k][:1] * 8
    return p


def gateway(root, profile=DESK):
    store = ParamStore(str(root), profile["name"], profile["sample_rate_hz"], profile["window_n"],
                       profile["axes"], mpack.packb(params_mod.factory(profile)), cap=8192)
    snaps = SnapshotRing(str(root), 2, profile["sample_rate_hz"], profile["window_n"], profile["axes"])
    return Gateway(profile, store, snaps, lambda: 0)


def running(windows):
    """Interleaved desk frames of a 50 Hz sine at a quarter of full scale on every axis."""
    amp = DESK["sensor"]["adc_max"] // 4
    t = np.arange(windows * DESK["window_n"])
    sig = (amp * np.sin(2 * np.pi * 50 * t / DESK["sample_rate_hz"])).astype(np.int16)
    return array.array("h", np.repeat(sig, DESK["axes"]).tobytes())


def stage(store, p):
    img = build_image(msgpack.packb(p, use_bin_type=True))
    store.stage_write(0, img)
    return store.stage_verify(len(img))


def test_the_factory_sets_pass():
    for name in ("desk", "pico_adxl345", "esp32s3_iis3dwb"):
        prof = board.load(str(REPO / "boards" / f"{name}.json"))
        param_check.trial(params_mod.factory(prof), prof)


@pytest.mark.parametrize("p, says", [
    (crashing_axes(), "'det_axes' is 8, the set has 3 axes"),
    (desk_set(det_bands=41), "'det_bands' is 41, 'fc_bands' holds 8 bands"),
    (desk_set(fc_bands=None), "'fc_bands' must be a list"),
    (desk_set(det_persist_q8=None), "'det_persist_q8' must hold ints"),
    (desk_set(det_thr_alert_q8=True), "'det_thr_alert_q8' must hold ints"),
    (desk_set(det_feat=[0, 1, 2 ** 31]), "'det_feat' must hold ints within"),
    (desk_set(det_base_sd_q4=[256]), "'det_base_sd_q4' must hold"),
    (desk_set(det_modes=2), "'det_mode_c_q8' must hold"),
    (desk_set(det_persist_q8=300), "det_persist_q8 must be an int in [1, 256]"),
    (desk_set(fc_vel_hz=[1000, 10]), "velocity band"),
])
def test_sets_that_would_not_run_are_refused_in_verify_and_nothing_is_committed(tmp_path, p, says):
    gw = gateway(tmp_path)
    before = gw.params.image
    with pytest.raises(ParamError, match="set does not run on this gateway") as e:
        stage(gw.params, p)
    assert says in str(e.value)
    with pytest.raises(ParamError, match="nothing verified"):
        gw.params.commit()
    assert gw.params.image == before and gw.params.source == "factory"


def test_without_the_trial_the_issues_set_crashes_the_window_path(tmp_path):
    # the failure the check exists for: the store alone accepts it, the window path raises
    gw = gateway(tmp_path)
    gw.params.trial = None
    stage(gw.params, crashing_axes())
    gw.apply_params(gw.params.commit())
    gw.feed(running(1), DESK["window_n"])
    with pytest.raises(IndexError):
        gw.window()


# ---- the fuzzer over parameter sets ----

KEYS = sorted(k for k in params_mod.factory(DESK) if k not in ("board",))
VALUES = st.one_of(
    st.none(), st.booleans(), st.integers(-2 ** 40, 2 ** 40), st.integers(-3, 70),
    st.sampled_from([0, 1, 2, 3, 8, 30, 31, 64, 65, 255, 256, 2 ** 16, 2 ** 30 - 1, 2 ** 30]),
    st.text(max_size=4), st.lists(st.integers(-2 ** 31, 2 ** 31), max_size=12),
    st.lists(st.lists(st.integers(-2, 300), max_size=3), max_size=10),
)


def mutate(p, changes, data):
    for key, value in changes:
        if key in p and isinstance(p[key], list) and data.draw(st.booleans(), "resize"):
            n = data.draw(st.integers(0, 2 * len(p[key]) + 2), "length")
            fill = p[key][0] if p[key] else 0
            value = (p[key] + [fill] * n)[:n]
        p[key] = value
    return p


@settings(max_examples=120, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                    HealthCheck.too_slow])
@given(changes=st.lists(st.tuples(st.sampled_from(KEYS), VALUES), min_size=1, max_size=3),
       data=st.data())
def test_fuzzed_sets_are_refused_or_run(tmp_path_factory, changes, data):
    root = tmp_path_factory.mktemp("fuzz")
    gw = gateway(root)
    p = mutate(params_mod.factory(DESK), changes, data)
    try:
        stage(gw.params, p)
    except ParamError:
        assert gw.params.source == "factory"       # refused: nothing committed
        return
    gw.apply_params(gw.params.commit())
    # committed: whole windows of a running pump (sines at 1/4 full scale) and of silence run
    n, axes = DESK["window_n"], DESK["axes"]
    run = running(3)
    for w in range(3):
        gw.feed(run[w * n * axes:(w + 1) * n * axes], n)
        gw.poll()
    gw.feed(array.array("h", bytes(2 * n * axes)), n)
    gw.poll()
    assert gw.windows == 4


# ---- boot: a set that fails anyway falls back to the previous set ----

def test_host_commands_refuse_the_sets_with_one_line(tmp_path, capsys):
    rec = sine_recording(tmp_path / "s.wav", seconds=1.0)
    bad = tmp_path / "bad.msgpack"
    bad.write_bytes(msgpack.packb(crashing_axes()))
    pico_bad = tmp_path / "pico.msgpack"
    pico_bad.write_bytes(msgpack.packb(crashing_axes(PICO)))
    nulls = tmp_path / "null.msgpack"
    nulls.write_bytes(msgpack.packb(desk_set(fc_bands=None)))
    for argv, says in [
        (["replay", str(rec), "--params", str(nulls)], "'fc_bands' must be a list"),
        (["replay", str(rec), "--params", str(bad)], "'det_axes' is 8"),
        (["deploy", "--port", "P", "--board", "pico_adxl345", "--dry-run", "--build",
          str(tmp_path / "b"), "--params", str(pico_bad)], "'det_axes' is 8, the set has 3 axes"),
        (["deploy", "--port", "P", "--board", "pico_adxl345", "--dry-run", "--build",
          str(rec) + "/b"], "cannot make the build folder"),
    ]:
        assert cli.main(argv) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and err.startswith("edgevib: error: ") and says in err, err
    with emulator(rec, tmp_path / "state", speed=0) as vg:
        assert vg.wait_until(vg.ended.is_set)
        for f, says in ((bad, "'det_axes' is 8"), (nulls, "'fc_bands' must be a list")):
            assert cli.main(["flash", str(f), "--port", vg.port]) == 2
            err = capsys.readouterr().err
            assert err.count("\n") == 1 and says in err
        assert vg.gateway.params.source == "factory" and vg.gateway.windows > 0


def test_a_board_with_room_for_one_set_tries_a_set_in_place_of_the_running_one(tmp_path, monkeypatch):
    # A board whose heap holds its running set but not a second feature core and detector (the
    # Pico: docs/boards.md, Memory budget): building beside it raises MemoryError (simulated on
    # the desk profile), so the trial runs in the running set's place.
    gw = gateway(tmp_path)
    build = params_mod.build

    def one_set_heap(p, profile):
        if hasattr(gw, "core"):
            raise MemoryError("memory allocation failed")
        return build(p, profile)
    monkeypatch.setattr(params_mod, "build", one_set_heap)
    gw.feed(running(1), DESK["window_n"])
    gw.poll()
    assert stage(gw.params, desk_set(version=1))["version"] == 1      # proven in place
    assert gw.det.thr_alert_q8 == params_mod.factory(DESK)["det_thr_alert_q8"]   # the committed set runs
    with pytest.raises(ParamError, match="'det_axes' is 8"):
        stage(gw.params, crashing_axes())
    with pytest.raises(ParamError, match="det_persist_q8 must be an int"):
        stage(gw.params, desk_set(version=2, det_persist_q8=300))
    gw.feed(running(2), DESK["window_n"])
    gw.poll()
    assert gw.windows == 2 and gw.params.source == "factory"       # still running, nothing lost but the ring
