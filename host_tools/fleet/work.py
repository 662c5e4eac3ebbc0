"""Fleet work as Dask tasks: what each gateway needs, and the task graph that does it.

Entry points: plan(root, ...) reads every gateway folder (manifest, parameter set, recording spans)
into a list of GatewayWork, each with its own error line when its folder is broken;
submit_replay(client, work, kind) submits one gateway's replay and returns the future of its
result; chunk_features and gateway_result are the two kinds of replay task; train_gateway is the
training task.

The replay of one gateway is
    chunk_features(chunk 0) ... chunk_features(chunk k)   in parallel, anywhere in the cluster
               \\__________________|__________________/
                          gateway_result                one detector pass in time order
A chunk is a run of the gateway's recordings (host_tools.fleet.layout.chunks: split only at gaps,
so no window straddles two chunks); its features are those of host_tools.twin.replay's
stream_features, and gateway_result steps one fresh device Detector over the chunks' features in
time order with replay.stream_result. That is exactly what `edgevib replay` does with the same
recordings in one process, so the results are identical; only where the work runs differs. Many
chunks of many gateways keep every worker busy, and one long archive is many feature tasks rather
than one long one.

A broken recording fails its chunk's task with the reader's one-line EdgevibError, which fails
that gateway's result and nothing else.
"""
from __future__ import annotations

import json
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

import firmware_py  # noqa: F401  (installs the micropython stand-in)
from firmware_py.dsp import feature_index as fi

from host_tools.data.param_files import board_path, encode_set, load_board, load_body
from host_tools.data.recording import atomic_write, read_stream
from host_tools.errors import EdgevibError
from host_tools.fleet import layout
from host_tools.twin.replay import (
    StreamFeatures, check_recordings, m_s2_per_count, stream_features, stream_result, twin_for)

# Frames per feature task: about 5.5 min of one gateway's data at 3200 Hz, a second or so of work,
# small next to the scheduler's cost per task and big enough that a year's archive is ~10^5 tasks.
FRAMES_PER_CHUNK = 1 << 20


@dataclass
class GatewayWork:
    """One gateway's share of a fleet run. error: why its folder cannot be used (then nothing else
    is set). chunks and healthy: recording paths per chunk of archive/ and healthy/, time order.
    samples: frames x axes of the archive chunks (the replay's input size)."""

    gateway: str
    folder: Path
    manifest: layout.Manifest | None = None
    params: dict | None = None
    params_summary: dict | None = None
    profile: dict | None = None
    chunks: list[list[str]] = field(default_factory=list)
    healthy: list[list[str]] = field(default_factory=list)
    samples: int = 0
    error: str | None = None


def plan(root: str | Path, since_s: float | None = None, until_s: float | None = None,
         params_root: str | Path | None = None, need_params: bool = True, healthy: bool = False,
         frames_per_chunk: int = FRAMES_PER_CHUNK) -> list[GatewayWork]:
    """Every gateway of fleet `root`, read and checked. since_s/until_s: keep recordings that
    start in [since_s, until_s) (Unix s). params_root: take params.msgpack from
    params_root/<gateway>/ instead of the gateway folder. need_params: a gateway without a set is
    an error. healthy: also plan the healthy/ recordings."""
    out = []
    for folder in layout.gateways(root):
        w = GatewayWork(folder.name, folder)
        try:
            _fill(w, since_s, until_s, Path(params_root) / folder.name if params_root else folder,
                  need_params, healthy, frames_per_chunk)
        except EdgevibError as e:
            w = GatewayWork(folder.name, folder, error=str(e))
        out.append(w)
    return out


def _fill(w: GatewayWork, since_s, until_s, params_dir: Path, need_params: bool, healthy: bool,
          frames_per_chunk: int) -> None:
    w.manifest = layout.read_manifest(w.folder)
    w.profile = load_board(board_path(w.manifest.board))
    pfile = params_dir / layout.PARAMS
    if pfile.is_file():
        _, w.params = load_body(pfile)
        for key, want in (("board", w.profile["name"]), ("fs_hz", w.profile["sample_rate_hz"]),
                          ("n", w.profile["window_n"]), ("axes", w.profile["axes"])):
            if w.params.get(key) != want:
                raise EdgevibError(f"{pfile}: {key} {w.params.get(key)!r} does not match board {w.manifest.board} ({want!r})")
        sfile = params_dir / layout.PARAMS_SUMMARY
        if sfile.is_file():
            try:
                w.params_summary = json.loads(sfile.read_text(encoding="utf-8"))
            except (ValueError, UnicodeDecodeError) as e:
                raise EdgevibError(f"{sfile}: not valid JSON ({e})") from None
    elif need_params:
        raise EdgevibError(f"{pfile}: no parameter set")
    spans = layout.recording_spans(layout.recording_files(w.folder / layout.ARCHIVE))
    spans = [s for s in spans if (since_s is None or s.t0_s >= since_s) and (until_s is None or s.t0_s < until_s)]
    w.chunks = [[str(s.path) for s in c] for c in layout.chunks(spans, frames_per_chunk)]
    w.samples = sum(s.frames for s in spans) * w.profile["axes"]
    if healthy:
        hs = layout.recording_spans(layout.recording_files(w.folder / layout.HEALTHY))
        w.healthy = [[str(s.path) for s in c] for c in layout.chunks(hs, frames_per_chunk)]


# --- replay tasks ---------------------------------------------------------------------------------

@dataclass
class ChunkFeatures:
    """Features of one chunk (rec indexes paths), with what the gateway pass checks across chunks."""

    sf: StreamFeatures
    paths: list[str]
    axes: tuple[str, ...]
    scale: float
    machine: str | None


def chunk_features(paths: Sequence[str], params: dict, profile: dict) -> ChunkFeatures:
    """Read one chunk's recordings at the set's rate and scale and compute their features (task)."""
    recs = read_stream(list(paths), expected_rate_hz=params["fs_hz"], m_s2_per_count=m_s2_per_count(params))
    check_recordings(recs, params)
    twin = twin_for(params, profile)
    machine = next((r.machine for r in recs if r.machine), None)
    try:
        sf = stream_features(recs, twin)
    except EdgevibError:
        # stream_features refuses only runs with no whole window; within a gateway's stream such
        # recordings simply give no windows (chunks never split a gap-free run).
        width = params["axes"] * fi.per_axis(len(params["fc_bands"]))
        sf = StreamFeatures(np.zeros((0, width), np.int32), np.zeros(0), np.zeros(0, np.int64))
    return ChunkFeatures(sf, [str(r.path) for r in recs], recs[0].axes, recs[0].m_s2_per_count, machine)


def gateway_result(name: str, params: dict, *parts: ChunkFeatures) -> dict[str, Any]:
    """One detector pass over the chunks' features in time order (task); what
    host_tools.twin.replay.replay_stream returns for the same recordings."""
    if not parts:
        raise EdgevibError(f"{name}: no recordings to replay")
    first = parts[0]
    for p in parts[1:]:
        if p.axes != first.axes:
            raise EdgevibError(f"{p.paths[0]}: axes {list(p.axes)} differ from {first.paths[0]} {list(first.axes)}")
        if first.machine and p.machine and p.machine != first.machine:
            raise EdgevibError(f"{p.paths[0]}: machine {p.machine!r} differs from {first.paths[0]} ({first.machine!r})")
    offsets = np.cumsum([0] + [len(p.paths) for p in parts[:-1]])
    if sum(len(p.sf.t_s) for p in parts) == 0:
        raise EdgevibError(f"{first.paths[0]}: the stream is shorter than one window of {params['n']} samples")
    sf = StreamFeatures(np.concatenate([p.sf.feats for p in parts]), np.concatenate([p.sf.t_s for p in parts]),
                        np.concatenate([p.sf.rec + o for p, o in zip(parts, offsets)]))
    paths = [q for p in parts for q in p.paths]
    return stream_result(sf, params, name, paths, first.axes, first.scale)


def submit_replay(client, w: GatewayWork, params: dict | None = None, kind: str = "archive", tag: str | None = None):
    """Submit the replay of gateway w's archive (kind "archive") or healthy recordings ("healthy")
    with `params` (default its own set); returns (feature futures, result future)."""
    p = params if params is not None else w.params
    tag = tag or uuid.uuid4().hex[:8]
    chunk_list = w.chunks if kind == "archive" else w.healthy
    feats = [client.submit(chunk_features, c, p, w.profile, key=f"features-{w.gateway}-{kind}-{i}-{tag}")
             for i, c in enumerate(chunk_list)]
    res = client.submit(gateway_result, w.gateway, p, *feats, key=f"replay-{w.gateway}-{kind}-{tag}")
    return feats, res


# --- training task --------------------------------------------------------------------------------

def train_gateway(gateway: str, paths: Sequence[str], profile: dict, out_dir: str, false_alerts_per_month: float,
                  seed: int, version: int) -> dict[str, Any]:
    """Train a set on one gateway's healthy recordings (one stream) and write out_dir/params.msgpack,
    params.json and params.report.txt, each whole (task). Returns what the fleet summary shows."""
    from firmware_py.run import params as pm
    from host_tools.fit.training import report_text, train

    if not paths:
        raise EdgevibError(f"{gateway}: no healthy recordings in {layout.HEALTHY}/ to train on")
    scale = m_s2_per_count(pm.factory(profile))
    recs = read_stream(list(paths), expected_rate_hz=profile["sample_rate_hz"], m_s2_per_count=scale)
    params, summary = train([recs], profile, false_alerts_per_month, seed=seed, version=version)
    body = encode_set(params, profile)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    atomic_write(out / layout.PARAMS, body)
    atomic_write(out / layout.PARAMS_SUMMARY, (json.dumps(summary, indent=1) + "\n").encode())
    atomic_write(out / "params.report.txt", report_text(summary).encode())
    t = summary["thresholds"]
    return {"gateway": gateway, "version": params["version"], "modes": summary["modes"]["k"],
            "alert": t["alert"], "alarm": t["alarm"],
            "expected_false_alerts_per_30_days": t.get("expected_false_alerts_per_30_days"),
            "warnings": summary.get("warnings", [])}


# --- review tasks ---------------------------------------------------------------------------------

def write_pump_report(out_dir: str, result: dict[str, Any], params: dict) -> str:
    """The pump's own replay report (host_tools.report.replay_report) into out_dir (task); returns its page."""
    from host_tools.report.replay_report import write_report
    Path(out_dir).parent.mkdir(parents=True, exist_ok=True)
    return str(write_report(out_dir, result, params, result["recordings"]))


def review_info(w: GatewayWork, report: str | None) -> dict[str, Any]:
    """What review.digest needs to know about gateway w besides its replays."""
    m = w.manifest
    info: dict[str, Any] = {"gateway": w.gateway, "report": report}
    if m is not None:
        info.update(pump=m.pump, site=m.site, board=m.board, overhauls=[d.isoformat() for d in m.overhauls],
                    params_since=m.params_since.isoformat() if m.params_since else None)
    if w.params is not None:
        info.update(params_version=w.params["version"], window_s=w.params["n"] / float(w.params["fs_hz"]))
    th = (w.params_summary or {}).get("thresholds", {})
    info["expected_per_30_days"] = th.get("expected_false_alerts_per_30_days")
    return info
