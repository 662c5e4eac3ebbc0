"""`edgevib events --port PORT --out DIR`: pull every event capture from a gateway as ONE WAV +
sidecar each.

A capture (firmware_py/store/snapshots.py) holds the windows that led to an alert or alarm
(the window that raised it last) and the stretch recorded after it, contiguous samples of every
axis the board has. It becomes DIR/event_<id>_<kind>.wav, a recording `check`, `train` and
`replay` take like any other, with a sidecar carrying: t0_s (the first sample, on the gateway's
clock, to the second), time_utc and t (the end of the window that raised the event),
full_scale (the converter's, from this host's profile of the board, if it has one), the
event's state, reason, driving feature (index and readable name) and score, pre_trigger_s and
post_trigger_s (seconds before and after that moment), the raw features of that window with a
readable per-axis summary in physical units. Files are written whole
(host_tools.data.recording.write_wav); a capture overwritten on the gateway between listing and
reading, or damaged on its flash (CRC), is reported and skipped.

With --fleet FLEET --gateway ID instead of --out, the captures are filed into that gateway's
captures/ in the fleet folder (host_tools.fleet.layout).
"""
from __future__ import annotations

import argparse
from collections import Counter
from pathlib import Path

import firmware_py  # noqa: F401
from firmware_py.detect.alarm import REASON_NAMES
from firmware_py.dsp import feature_index as fi
from firmware_py.store.snapshots import parse
from host_tools.data import units
from host_tools.data.times import utc_text
from host_tools.data.units import feature_name, m_s2_per_count
from host_tools.link.device_link import (add_key_argument, board_full_scale, committed_params, connected, raw_frames,
                                         read_key)
from host_tools.progress import progress_bar
from host_tools.errors import EdgevibError
from host_tools.link import DeviceRefused
from host_tools.data.recording import write_wav

HELP = "pull the gateway's event captures (before and after each alert or alarm) as WAV + sidecar"
AXIS_NAMES = ("x", "y", "z")


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--port", required=True, help="serial port of the gateway (or the emulator's pty)")
    add_key_argument(p)
    p.add_argument("--out", metavar="DIR", help="folder for the captures (made if missing)")
    p.add_argument("--fleet", metavar="FLEET", help="instead of --out: file into the captures/ of --gateway in this fleet folder")
    p.add_argument("--gateway", metavar="ID", help="with --fleet: the gateway's id (its folder name)")


def summary(features: list[int], axes: int, scale: float) -> dict:
    """Per-axis velocity (mm/s r.m.s.), r.m.s. and peak (m/s^2), crest and kurtosis."""
    per = len(features) // axes
    out = {}
    for a in range(axes):
        f = features[a * per:(a + 1) * per]
        out[AXIS_NAMES[a] if a < len(AXIS_NAMES) else f"a{a}"] = {
            "vel_mm_s": round(units.velocity_mm_s(f[fi.F_VEL], scale), 4),
            "rms_m_s2": round(units.accel_m_s2(f[fi.F_RMS], scale), 5),
            "peak_m_s2": round(units.accel_m_s2(f[fi.F_PEAK], scale), 5),
            "crest": round(units.ratio(f[fi.F_CREST]), 4),
            "kurtosis": round(units.ratio(f[fi.F_KURT]), 4),
        }
    return out


def save_event(out: Path, img: bytes, params: dict, board: str) -> Path:
    """Write one capture file image as one WAV + sidecar in folder out; returns the WAV path.
    params: the set the gateway runs (counts scale, feature names). ValueError if damaged."""
    meta, raw = parse(img)
    n, axes, fs = meta["n"], meta["axes"], meta["fs_hz"]
    pre, post = meta["pre"], meta["post"]
    scale = m_s2_per_count(params)
    names = list(AXIS_NAMES[:axes]) + [f"a{i}" for i in range(3, axes)]
    feat = meta["feature"]
    sidecar = {
        "m_s2_per_unit": scale,
        "sample_rate_hz": float(fs),
        "axes": names,
        "t0_s": meta["t"] - pre * n / fs,
        "source": "edgevib events",
        "board": board,
        "event_id": meta["id"],
        "kind": meta["kind"],
        "time_utc": utc_text(meta["t"], 0),
        "t": meta["t"],
        "state": meta["kind"],
        "reason": REASON_NAMES[meta["reason"]] if 0 <= meta["reason"] < len(REASON_NAMES) else str(meta["reason"]),
        "feature_index": feat,
        "feature": feature_name(feat, params, names) if feat >= 0 else None,
        "score": meta["score_q8"] / 256,          # Q8 spreads
        "mode": meta["mode"],
        "pre_trigger_s": pre * n / fs,
        "post_trigger_s": post * n / fs,
        "features": list(meta["features"]),
        "features_summary": summary(list(meta["features"]), axes, scale),
        **board_full_scale(board),
    }
    frames = raw_frames(raw, n, axes, pre + post)
    return write_wav(out / f"event_{meta['id']:05d}_{meta['kind']}.wav", frames, fs, sidecar)


def _pull(c, e: dict, out: Path, params: dict, board: str, saved: list, lost: list) -> None:
    """Read capture e from the gateway and save it (saved), or note why it could not be (lost)."""
    try:
        img = c.event_read(e["id"])
    except DeviceRefused as err:
        if err.code != "missing":
            raise
        lost.append(f"{e['id']} (overwritten)")
        return
    try:
        saved.append(save_event(out, img, params, board))
    except ValueError as err:
        lost.append(f"{e['id']} (damaged on the gateway: {err})")


def run(args: argparse.Namespace) -> int:
    from host_tools.fleet.layout import CAPTURES, filing_target
    out = filing_target(args.out, args.fleet, args.gateway, CAPTURES, "--out DIR")
    if out.exists() and not out.is_dir():
        raise EdgevibError(f"{out}: exists and is not a folder")
    with connected(args.port, key=read_key(args.key_file)) as c:
        board = c.identify()["board"]
        params = committed_params(c)
        listed = c.event_list()
        out.mkdir(parents=True, exist_ok=True)
        saved, lost = [], []
        with progress_bar(len(listed), "events", "events") as bar:
            for e in listed:
                _pull(c, e, out, params, board, saved, lost)
                bar.update(1)
    kinds = Counter(p.stem.rsplit("_", 1)[1] for p in saved)
    detail = ", ".join(f"{v} {k}" for k, v in sorted(kinds.items()))
    noun = "event capture" if len(saved) == 1 else "event captures"
    print(f"pulled {len(saved)} {noun} from {args.port} into {out}" + (f" ({detail})" if detail else ""))
    if lost:
        print(f"{len(lost)} listed captures could not be pulled: " + ", ".join(lost))
    return 0
