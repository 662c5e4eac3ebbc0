"""Fleet runs on a Dask cluster: the same results as each pump replayed alone, a broken gateway
folder that fails alone, and a worker killed mid-run that costs nothing but a retry.

The reference for every fleet result is `host_tools.twin.replay.replay` of the same gateway's
recordings in one process (what `edgevib replay FOLDER` does): the issue asks for results
identical to that, so the comparisons are exact (bit-equal arrays, equal events and summaries).
The data is a tiny slice of the invented demo fleet (two pumps, three days, a snapshot every six
hours); one parameter set serves both gateways.
"""
from __future__ import annotations

import json
import os
import signal
from datetime import date
from pathlib import Path

import numpy as np
import pytest

from host_tools.data import demo_fleet as dfl
from host_tools.data.analysis import load_board
from host_tools.data.files import encode_set
from host_tools.fleet import engine, layout, runs, work
from host_tools.twin.replay import replay

distributed = pytest.importorskip("distributed")

CHUNK_WINDOWS = 16     # a 4 s snapshot is 25 windows: snapshots split over tasks, and tasks of several snapshots


@pytest.fixture(scope="module")
def fleet(tmp_path_factory):
    """A fleet folder of two demo pumps with one set installed; (root, params, profile). The set is
    trained on the training tests' synthetic healthy stream for the same desk board (quicker than
    a week of demo snapshots), with the short time keys of tests/test_replay.py so that 4 s
    snapshots (shorter than the demo's, for speed) reach every state."""
    from host_tools.fit.training import train
    from tests.test_training import PROFILE, healthy_stream
    root = tmp_path_factory.mktemp("fleet") / "fleet"
    sc = dfl.build_fleet_scenario(days=3.0, training_days=1.5, interval_s=21600.0, pumps=2, snapshot_s=4.0)
    layout.init_fleet(root, "test fleet")
    profile = load_board(None)
    assert profile == PROFILE
    for p in sc.pumps:
        layout.add_gateway(root, dfl.gateway_id(p), dfl.manifest(sc, p, profile["name"]))
        dfl.write_pump(root, sc, p)
    params, summary = train(healthy_stream(seed=11, per_point=3), profile, 1.0)
    params.update(det_steady_ms=320, det_hold_ms=480, det_persist_ms=800, det_persist_q8=154,
                  det_escalate_ms=800, det_dwell_ms=800)
    for g in layout.gateways(root):
        layout.install_set(g, encode_set(params, profile), summary, date(2026, 3, 3))
    return root, params, profile


def _alone(folder: Path, params: dict, profile: dict):
    """The gateway's archive replayed alone, in this process, as `edgevib replay FOLDER` does."""
    return replay([folder / layout.ARCHIVE], params, profile, names=[folder.name])


def _same(fleet_result, alone) -> None:
    assert fleet_result.events == alone.events
    assert fleet_result.summary == alone.summary
    assert fleet_result.recordings == alone.recordings
    assert list(fleet_result.windows) == list(alone.windows)
    for k, v in fleet_result.windows.items():
        np.testing.assert_array_equal(v, alone.windows[k], err_msg=k)   # nan and -inf compare equal here


def _run_replays(client, root: Path):
    plans = runs.plan(client, root, True, chunk_windows=CHUNK_WINDOWS)
    futs = {w.gateway: work.submit_replay(client, w)[1] for w in plans}
    engine.watch(list(futs.values()), "test", quiet=True)
    return {g: f.result() for g, f in futs.items()}, plans


def test_fleet_replay_equals_each_pump_alone(fleet):
    root, params, profile = fleet
    with engine.cluster(workers=2, processes=False) as client:
        results, plans = _run_replays(client, root)
    for w in plans:   # the chunking is exercised both ways
        assert any(len(t.chunks) > 1 for t in w.chunks) and len(w.chunks) > len(w.paths) / 2
    for g in layout.gateways(root):
        _same(results[g.name], _alone(g, params, profile))
    assert any(r.events for r in results.values())      # the comparison covers events, not only quiet windows


def test_broken_gateway_folders_fail_alone(fleet, tmp_path):
    root, params, profile = fleet
    # a copy of the fleet plus a gateway with a broken manifest and one with a truncated recording
    import shutil
    copy = tmp_path / "fleet"
    shutil.copytree(root, copy)
    bad_manifest = copy / "bad-manifest"
    shutil.copytree(copy / dfl.gateway_id("P-102"), bad_manifest)
    (bad_manifest / layout.MANIFEST).write_text('{"pump": "X-9", "site": ')
    bad_wav = copy / "bad-recording"
    shutil.copytree(copy / dfl.gateway_id("P-102"), bad_wav)
    victim = sorted((bad_wav / layout.ARCHIVE).glob("*.wav"))[3]
    victim.write_bytes(victim.read_bytes()[:30])      # cut inside the header
    bad_side = copy / "bad-sidecar"
    shutil.copytree(copy / dfl.gateway_id("P-102"), bad_side)
    side = sorted((bad_side / layout.ARCHIVE).glob("*.json"))[-1]
    meta = json.loads(side.read_text())
    meta["m_s2_per_unit"] = "fast"
    side.write_text(json.dumps(meta))
    out = tmp_path / "out"
    out.mkdir()
    with engine.cluster(workers=2, processes=False) as client:
        doc, lines = runs.replay_fleet(client, copy, out, None, None, review=True, reports=False, quiet=True)
    assert set(doc["errors"]) == {"bad-manifest", "bad-recording", "bad-sidecar"}
    assert "gateway.json" in doc["errors"]["bad-manifest"] and "JSON" in doc["errors"]["bad-manifest"]
    assert victim.name in doc["errors"]["bad-recording"]
    assert side.name in doc["errors"]["bad-sidecar"] and "m_s2_per_unit" in doc["errors"]["bad-sidecar"]
    assert all("\n" not in e for e in doc["errors"].values())      # one line each
    assert any(line.endswith(doc["errors"]["bad-recording"]) for line in lines)
    for g in (dfl.gateway_id("P-101"), dfl.gateway_id("P-102")):
        alone = _alone(copy / g, params, profile)
        assert doc["gateways"][g]["events"] == alone.events
        assert doc["gateways"][g]["summary"] == alone.summary["streams"][g]
    page = (out / "index.html").read_text()
    assert "bad-recording" in page and "unreadable" in page
    for png in ("overview.png", "drift.png", "rates.png"):
        assert (out / png).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and f'src="{png}"' in page   # PNG signature (RFC 2083)
    assert json.loads((out / "review.json").read_text())["errors"] == doc["errors"]


class _KillOnce:
    """Scheduler plugin: the first time a gateway's detector pass is handed to a worker, kill that
    worker's process (SIGKILL, as a crash or the kernel's out-of-memory killer would)."""

    name = "kill-once"

    def __init__(self, scheduler):
        self.scheduler = scheduler
        self.killed: list[str] = []

    def transition(self, key, start, finish, *args, **kwargs):
        # runs on the scheduler's event loop, one transition at a time
        if finish != "processing" or not str(key).startswith("gateway_pass") or self.killed:
            return
        ws = self.scheduler.tasks[key].processing_on
        self.killed.append(str(key))
        os.kill(ws.pid, signal.SIGKILL)


def test_killed_worker_is_retried_with_identical_results(fleet):
    root, params, profile = fleet
    from distributed.diagnostics.plugin import SchedulerPlugin

    with engine.cluster(workers=2, processes=True) as client:
        scheduler = client.cluster.scheduler          # a local cluster's scheduler lives in this process
        plugin = type("KillOnce", (_KillOnce, SchedulerPlugin), {})(scheduler)
        scheduler.add_plugin(plugin)
        results, _ = _run_replays(client, root)
    assert len(plugin.killed) == 1      # a worker died while holding a detector pass
    for g in layout.gateways(root):
        _same(results[g.name], _alone(g, params, profile))


def test_manifest_is_checked(tmp_path):
    root = layout.init_fleet(tmp_path / "f", "f")
    good = {"pump": "P-1", "site": "S", "board": "desk", "overhauls": ["2025-01-02"],
            "bearing": {"n_elements": 9, "ball_diameter_mm": 7.94, "pitch_diameter_mm": 39.04}}
    layout.add_gateway(root, "g1", good)
    m = layout.read_manifest(root / "g1")
    assert (m.pump, m.overhauls[0].isoformat(), m.params_since) == ("P-1", "2025-01-02", None)
    for bad, words in ((dict(good, overhauls=["2025-13-01"]), "calendar date"),
                       (dict(good, overhauls=["2025-02-01", "2024-01-01"]), "oldest first"),
                       (dict(good, board=""), "'board'"),
                       (dict(good, bearing={"n_elements": 9, "ball_diameter_mm": 40, "pitch_diameter_mm": 39}), "ball diameter"),
                       (dict(good, bearing={"n_elements": 9.5, "ball_diameter_mm": 7.94, "pitch_diameter_mm": 39.04}),
                        "rolling elements")):     # a count is whole: refused, never truncated
        with pytest.raises(Exception) as e:
            layout.add_gateway(root, "g2", bad)
        assert words in str(e.value) and "gateway.json" in str(e.value)
    assert not (root / "g2").exists()      # nothing half-made


def test_severity_ranks_follow_the_rules():
    from host_tools.fleet.review import severity
    quiet = {"state_now": "normal", "alarms": 0, "alerts": 0, "sensor_faults": 0, "params_before_overhaul": False,
             "last_overhaul": "2025-01-01", "drift": 1.1, "expected_per_30_days": 1.0, "alerts_per_30_days": 0.0}
    assert severity(quiet) == (1, [])
    assert severity(dict(quiet, params_before_overhaul=True))[0] == 2
    assert severity(dict(quiet, drift=2.5))[0] == 2
    assert severity(dict(quiet, alerts_per_30_days=3.5))[0] == 2      # over three times the expected 1
    assert severity(dict(quiet, alerts_per_30_days=2.9))[0] == 1
    assert severity(dict(quiet, alerts=1))[0] == 3
    assert severity(dict(quiet, state_now="sensor_fault"))[0] == 3
    assert severity(dict(quiet, state_now="alarm", alarms=1))[0] == 4
    assert severity({"error": "x: broken"}) == (5, ["x: broken"])


def test_every_detector_state_has_a_severity_rank():
    # the page ranks each day's states; a state the detector gains must not break a pump's row
    from firmware_py.detect.alarm import STATE_NAMES
    from host_tools.fleet import review
    assert set(review._WORST) == set(STATE_NAMES)


def test_fleet_train_then_compare_leaves_the_sets_in_use_untouched(fleet, tmp_path):
    # train writes candidate sets elsewhere; compare replays each gateway's archive through its set
    # in use and the candidate; neither touches a gateway's installed set (bytes compared).
    root, params, profile = fleet
    before = {g.name: (g / layout.PARAMS).read_bytes() for g in layout.gateways(root)}
    cand = tmp_path / "candidates"
    with engine.cluster(workers=2, processes=False) as client:
        doc, lines = runs.train_fleet(client, root, cand, 1.0, quiet=True)
        # this small fleet's healthy folders hold too little steady running for a set: training
        # refuses with its own one-line reason per gateway, never an internal error
        assert set(doc["gateways"]) | set(doc["errors"]) == set(before)
        assert all("\n" not in e and "internal error" not in e for e in doc["errors"].values())
        assert all("steady running" in e for e in doc["errors"].values()), doc["errors"]
        trained = set(doc["gateways"])
        cdoc, clines = runs.compare_fleet(client, root, cand, tmp_path / "cmp", None, None, quiet=True)
    assert set(cdoc["gateways"]) == trained
    assert set(cdoc["errors"]) == set(before) - trained
    assert all("no candidate set" in e for e in cdoc["errors"].values())
    assert clines[-1].startswith(f"{len(trained)} of {len(before)} gateways compared")
    assert {g.name: (g / layout.PARAMS).read_bytes() for g in layout.gateways(root)} == before


@pytest.fixture(scope="module")
def trainable(tmp_path_factory, fleet):
    """A fleet of the same two demo pumps with the demo's 10 s snapshots, whose healthy/ folders
    hold enough steady running for training: two days of a snapshot every four hours (12 and 14
    recordings, P-102's with a stop and restart), then half a day of archive. The set in use is
    the `fleet` fixture's."""
    root0, _, profile = fleet
    root = tmp_path_factory.mktemp("trainable") / "fleet"
    sc = dfl.build_fleet_scenario(days=2.5, training_days=2.0, interval_s=14400.0, pumps=2)
    layout.init_fleet(root, "trainable test fleet")
    for p in sc.pumps:
        g = dfl.gateway_id(p)
        summary = json.loads((root0 / g / layout.PARAMS_SUMMARY).read_text())
        layout.add_gateway(root, g, dict(dfl.manifest(sc, p, profile["name"]), params_since="2026-03-05"),
                           (root0 / g / layout.PARAMS).read_bytes(), summary)
        dfl.write_pump(root, sc, p)
    return root, profile


def test_fleet_train_equals_edgevib_train_alone_and_compare_runs_on_its_sets(trainable, tmp_path):
    # The rule: a fleet run gives what each pump alone gives. The reference is `edgevib
    # train` on the gateway's healthy/ folder in this process (same board, version, target):
    # the parameter sets must be the same bytes. Then `fleet compare` replays each archive through
    # the set in use and that candidate, and the candidate's events and summary must equal
    # `edgevib replay`'s (host_tools.twin.replay.replay) of the archive with the set trained alone.
    from host_tools.cli import main
    from host_tools.data.files import load_body
    root, profile = trainable
    gws = layout.gateways(root)
    before = {g.name: (g / layout.PARAMS).read_bytes() for g in gws}
    version = load_body(gws[0] / layout.PARAMS)[1]["version"] + 1     # fleet train: one above the set in use
    cand, cmp_out = tmp_path / "candidates", tmp_path / "cmp"
    with engine.cluster(workers=2, processes=False) as client:
        doc, lines = runs.train_fleet(client, root, cand, 1.0, quiet=True)
        assert doc["errors"] == {} and set(doc["gateways"]) == set(before), doc["errors"]
        cdoc, clines = runs.compare_fleet(client, root, cand, cmp_out, None, None, quiet=True)
    board = Path(__file__).resolve().parent.parent / "boards" / f"{profile['name']}.json"
    for g in gws:
        alone = tmp_path / "alone" / f"{g.name}.msgpack"
        alone.parent.mkdir(exist_ok=True)
        assert main(["--quiet", "train", str(g / layout.HEALTHY), "--board", str(board),
                     "--version", str(version), "--false-alerts-per-month", "1", "--jobs", "1", "--out", str(alone)]) == 0
        assert (cand / g.name / layout.PARAMS).read_bytes() == alone.read_bytes(), g.name
        assert (cand / g.name / layout.PARAMS_SUMMARY).read_bytes() == alone.with_suffix(".json").read_bytes()
        assert doc["gateways"][g.name]["version"] == version
        _, params = load_body(alone)
        ref = _alone(g, params, profile)
        c = cdoc["gateways"][g.name]
        assert c["sets"] == ["in use", "candidate"]
        assert c["events"]["candidate"] == ref.events
        assert c["summary"]["candidate"] == ref.summary
        assert (cmp_out / g.name / "compare" / "index.html").is_file()
    assert cdoc["errors"] == {} and clines[-1].startswith(f"{len(gws)} of {len(gws)} gateways compared")
    assert {g.name: (g / layout.PARAMS).read_bytes() for g in gws} == before     # nothing flashed


def test_fleet_train_takes_the_bearing_from_the_manifest(trainable, tmp_path):
    # The manifest is the gateway's own record of its bearing, and recordings pulled by `record`
    # carry none in their sidecars: the set's defect orders must be the manifest geometry's, by the
    # kinematic formulas (host_tools.data.bearing.orders_q12, checked against the handbook formulas
    # in tests/test_bearing.py). A geometry unlike the sidecars' shows which one wins.
    from host_tools.data.bearing import BearingGeometry, orders_q12
    from host_tools.data.files import load_body
    root, profile = trainable
    g = layout.gateways(root)[0]
    other = {"n_elements": 12, "ball_diameter_mm": 6.0, "pitch_diameter_mm": 60.0}
    paths = sorted(str(p) for p in (g / layout.HEALTHY).glob("*.wav"))
    work.train_gateway(g.name, paths, profile, str(tmp_path / "set"), 1.0, 2, other)
    _, params = load_body(tmp_path / "set" / layout.PARAMS)
    assert params["fc_bear_q12"] == orders_q12(BearingGeometry(12, 6.0, 60.0))
