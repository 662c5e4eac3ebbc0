"""Fleet work as Dask tasks: what each gateway needs, and the tasks that do it.

Entry points: plan_gateway(folder, ...) is the task that reads one gateway folder (manifest,
parameter set, its recordings opened and cut into chunks) into a GatewayWork; submit_replay(client,
w, params, kind) submits one gateway's replay and returns the future of its ReplayResult;
chunk_features and gateway_pass are the two kinds of replay task; train_gateway trains one
gateway; write_pump_report writes one pump's replay report.

The replay of one gateway is

    chunk_features(chunk 0)  ...  chunk_features(chunk k)     in parallel, anywhere in the cluster
               \\__________________|_________________/
                          gateway_pass                        one detector pass in time order

built from host_tools.twin.replay's streaming pieces: the chunks are replay.plan_chunks of the
gateway's stream (with FLEET_CHUNK_WINDOWS windows each, so a task is a second or so of work),
their samples (and each chunk's lead window) are turned into features by replay.chunk_features,
and gateway_pass steps one replay.StreamReplay (one device Detector, state carried) over the
chunks' features in order, then replay.assemble makes its ReplayResult. That is what `edgevib
replay` does with the same recordings in one process, so the results are identical; only where
the work runs differs. Many chunks of many gateways keep every worker busy, and one long archive is
many feature tasks rather than one long one.

A broken recording or folder fails its own task with a one-line EdgevibError, which fails that
gateway's result and nothing else.
"""
from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from host_tools.data.analysis import BOARDS, load_board, profile_for_set, scale_of
from host_tools.data.bearing import geometry_from_record
from host_tools.data.files import encode_set, load_body
from host_tools.data.recording import atomic_write, open_recording, open_stream, read_stream
from host_tools.errors import EdgevibError
from host_tools.fleet import layout
from host_tools.twin.feature_twin import FeatureTwin, TwinConfig
from host_tools.twin.replay import (
    TRACK_CAP, ChunkPlan, ReplayResult, StreamFeatures, StreamReplay, WindowKeeper, assemble, m_s2_per_count,
    plan_chunks, twin_for)
from host_tools.twin import replay

# Windows per feature task: 8192 windows of 512 samples are 4.2 M frames, about 22 min of one
# gateway's data at 3200 Hz and a second or so of work: small next to the scheduler's few
# milliseconds per task, and a year of 10 s snapshots every 10 minutes (about 3.3 M windows) is
# about 400 tasks per gateway.
FLEET_CHUNK_WINDOWS = 8192


@dataclass
class ChunkTask:
    """One feature task: consecutive chunks of replay.plan_chunks, each as (pieces, t_s, rec,
    lead, follows): samples to read as (path, first frame, end frame) pieces, the end times t_s (s)
    and owning recordings rec (index into the gateway's paths) of its windows, the pieces of the
    window before it where it continues a chunk (ChunkPlan.lead), and whether its windows follow
    each other. Chunks never span a gap, so an archive of snapshots has one chunk per snapshot; a
    task takes as many as make FLEET_CHUNK_WINDOWS windows."""

    chunks: list[tuple[list[tuple[str, int, int]], np.ndarray, np.ndarray, list[tuple[str, int, int]], bool]]


@dataclass
class GatewayWork:
    """One gateway's share of a fleet run. paths/chunks: archive/ recordings in time order and the
    feature tasks over them; healthy_paths/healthy_chunks: the same for healthy/ (when asked).
    samples: frames x axes of the archive recordings replayed. error: why the folder cannot be used."""

    gateway: str
    folder: Path
    manifest: layout.Manifest | None = None
    params: dict | None = None
    params_summary: dict | None = None
    profile: dict | None = None
    paths: list[str] = field(default_factory=list)
    chunks: list[ChunkTask] = field(default_factory=list)
    healthy_paths: list[str] = field(default_factory=list)
    healthy_chunks: list[ChunkTask] = field(default_factory=list)
    samples: int = 0
    error: str | None = None


def plan_gateway(folder: str, since_s: float | None = None, until_s: float | None = None,
                 params_dir: str | None = None, need_params: bool = True, healthy: bool = False,
                 chunk_windows: int = FLEET_CHUNK_WINDOWS) -> GatewayWork:
    """Read and check one gateway folder (task; never raises: a broken folder gives
    GatewayWork.error). since_s/until_s: keep recordings that start in [since_s, until_s) (Unix
    s). params_dir: take params.msgpack from there instead of the gateway folder. need_params: a
    gateway without a set is an error. healthy: also plan the healthy/ recordings."""
    f = Path(folder)
    w = GatewayWork(f.name, f)
    try:
        _fill(w, since_s, until_s, Path(params_dir) if params_dir else f, need_params, healthy, chunk_windows)
    except EdgevibError as e:
        return GatewayWork(f.name, f, error=str(e))
    return w


def _fill(w: GatewayWork, since_s, until_s, params_dir: Path, need_params: bool, healthy: bool,
          chunk_windows: int) -> None:
    w.manifest = layout.read_manifest(w.folder)
    board_file = BOARDS / f"{w.manifest.board}.json"
    if not board_file.is_file():
        raise EdgevibError(f"{w.folder / layout.MANIFEST}: no profile for board {w.manifest.board!r} in {BOARDS}")
    pfile = params_dir / layout.PARAMS
    if pfile.is_file():
        _, w.params = load_body(pfile)
        try:
            w.profile = profile_for_set(w.params, board_file)
        except EdgevibError as e:
            raise EdgevibError(f"{pfile}: {e}") from None
        sfile = params_dir / layout.PARAMS_SUMMARY
        if sfile.is_file():
            try:
                w.params_summary = json.loads(sfile.read_text(encoding="utf-8"))
            except (ValueError, UnicodeDecodeError) as e:
                raise EdgevibError(f"{sfile}: not valid JSON ({e})") from None
    elif need_params:
        raise EdgevibError(f"{pfile}: no parameter set")
    else:
        w.profile = load_board(board_file)
    fs, scale = w.profile["sample_rate_hz"], scale_of(w.profile)
    files = layout.recording_files(w.folder / layout.ARCHIVE)
    if files:
        recs = [r for r in open_stream(files, fs, scale)
                if (since_s is None or (r.t0_s or 0.0) >= since_s) and (until_s is None or (r.t0_s or 0.0) < until_s)]
        if recs:
            w.paths, w.chunks = _chunk_tasks(recs, w.profile, chunk_windows)
            w.samples = sum(r.n_frames for r in recs) * w.profile["axes"]
    if healthy:
        files = layout.recording_files(w.folder / layout.HEALTHY)
        if files:
            w.healthy_paths, w.healthy_chunks = _chunk_tasks(open_stream(files, fs, scale), w.profile, chunk_windows)


def _chunk_tasks(recs: Sequence[Any], profile: dict, chunk_windows: int) -> tuple[list[str], list[ChunkTask]]:
    paths = [str(r.path) for r in recs]
    tasks: list[ChunkTask] = []
    size = chunk_windows
    for pl in plan_chunks(recs, profile["window_n"], float(profile["sample_rate_hz"]), chunk_windows,
                          int(profile["analyse_every"])):
        if size >= chunk_windows:
            tasks.append(ChunkTask([]))
            size = 0
        tasks[-1].chunks.append(([(paths[i], a, b) for i, a, b in pl.pieces], pl.t_s, pl.rec,
                                 [(paths[i], a, b) for i, a, b in pl.lead], pl.follows))
        size += len(pl.t_s)
    return paths, tasks


# --- replay tasks ---------------------------------------------------------------------------------

def chunk_features(task: ChunkTask, cfg: TwinConfig, axes: int, scale: float) -> StreamFeatures:
    """Read one chunk's samples at the rate of feature configuration `cfg` (twin_for of the set)
    and counts scale `scale` (m/s^2 per count), and compute their features (task)."""
    twin = FeatureTwin(cfg, axes)
    feats = []
    for pieces, t_s, rec, lead, follows in task.chunks:
        files = [open_recording(p, cfg.fs_hz, scale) for p, _, _ in pieces + lead]
        local = ChunkPlan(0, t_s, rec, [(k, a, b) for k, (_, a, b) in enumerate(pieces)],
                          [(len(pieces) + k, a, b) for k, (_, a, b) in enumerate(lead)], follows)
        feats.append(replay.chunk_features(twin, files, local))
    # each window's features depend on its own samples and the window before, which a chunk
    # reads as its lead: joining chunks changes nothing
    return StreamFeatures(np.concatenate(feats), np.concatenate([c[1] for c in task.chunks]),
                          np.concatenate([c[2] for c in task.chunks]))


def gateway_pass(name: str, paths: Sequence[str], params: dict, profile: dict, columns: Sequence[str] | None,
                 *features: StreamFeatures) -> ReplayResult:
    """One detector pass over a gateway's chunk features in time order (task): the ReplayResult of
    one stream, keeping the per-window `columns` (None: all; else bounded as replay keeps its
    tracks, TRACK_CAP)."""
    sr = StreamReplay(list(paths), params, profile, name)
    keep = WindowKeeper(None if columns is None else TRACK_CAP)
    for sf in features:
        keep.add(sr.step(sf).columns(columns))
    return assemble([sr], [keep])


def submit_replay(client, w: GatewayWork, params: dict | None = None, kind: str = "archive",
                  columns: Sequence[str] | None = None, profile: dict | None = None):
    """Submit the replay of gateway w's archive (kind "archive") or healthy recordings ("healthy")
    with `params` (default its own set); returns (feature futures, result future). Feature tasks
    of the same chunk and set are shared (Dask names them by their inputs)."""
    p = params if params is not None else w.params
    prof = profile if profile is not None else w.profile
    tasks, paths = (w.chunks, w.paths) if kind == "archive" else (w.healthy_chunks, w.healthy_paths)
    cfg = twin_for(p, prof).cfg      # what the features depend on: two sets alike in it share these tasks
    feats = [client.submit(chunk_features, t, cfg, p["axes"], m_s2_per_count(p), pure=True) for t in tasks]
    res = client.submit(gateway_pass, w.gateway, paths, p, prof, None if columns is None else tuple(columns),
                        *feats, pure=True)
    return feats, res


def compare_gateway(out_dir: str, results: Sequence[ReplayResult], sets: Sequence[Any]) -> dict[str, Any]:
    """Compare a gateway's replays with its set in use and a candidate (host_tools.twin.compare.
    compare_results), write the comparison page into out_dir (task); the comparison's JSON and
    its summary line."""
    from host_tools.report.compare_report import summary_line, write_compare_report
    from host_tools.twin.compare import compare_results
    c = compare_results(list(results), list(sets))
    Path(out_dir).parent.mkdir(parents=True, exist_ok=True)
    write_compare_report(out_dir, c)
    return {"comparison": c.to_json(), "line": summary_line(c)}


# --- training and reports -------------------------------------------------------------------------

def train_gateway(gateway: str, paths: Sequence[str], profile: dict, out_dir: str, false_alerts_per_month: float,
                  version: int, bearing: dict | None = None) -> dict[str, Any]:
    """Train a set on one gateway's healthy recordings (one stream) and write out_dir/params.msgpack,
    params.json and params.report.txt, each whole (task). Returns what the fleet summary shows.
    bearing: the manifest's bearing (layout.Manifest.bearing); it is the gateway's own record, so
    it wins over a sidecar's, and recordings pulled by `record` (no bearing in their sidecars) still
    get their envelope lines."""
    from host_tools.fit.training import report_text, train

    if not paths:
        raise EdgevibError(f"{gateway}: no healthy recordings in {layout.HEALTHY}/ to train on")
    recs = read_stream(list(paths), expected_rate_hz=profile["sample_rate_hz"], m_s2_per_count=scale_of(profile))
    params, summary = train([recs], profile, false_alerts_per_month, version=version,
                            bearing=geometry_from_record(bearing) if bearing else None)
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
            "upper_bound": bool(t.get("upper_bound")),
            "warnings": summary.get("warnings", [])}


def write_pump_report(out_dir: str, result: ReplayResult, params: dict) -> str:
    """The pump's own replay report (host_tools.report.replay_report) into out_dir (task); its page."""
    from host_tools.report.replay_report import write_report
    Path(out_dir).parent.mkdir(parents=True, exist_ok=True)
    return str(write_report(out_dir, result, params, result.recordings[0]))


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
    info["expected_upper_bound"] = bool(th.get("upper_bound"))      # "at most" (sets trained before: False)
    return info
