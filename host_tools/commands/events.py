"""`edgevib events --port PORT --out DIR`: pull every event snapshot from a gateway as WAV +
sidecar.

Each snapshot (firmware_py/store/snapshots.py) holds the raw window that raised an alert or alarm and
its features. It becomes DIR/event_<id>_<kind>.wav with a sidecar carrying kind, t (the gateway's
clock when it was saved), the raw features, a readable per-axis summary in physical units, and
t0_s (the window's start: t less one window, to the second of the gateway's clock). Files are
written whole (host_tools.data.recording.write_wav); a snapshot overwritten on the gateway between
listing and reading is reported and skipped.

With --fleet FLEET --gateway ID instead of --out, the snapshots are filed into that gateway's
captures/ in the fleet folder (host_tools.fleet.layout).
"""
from __future__ import annotations

import argparse
from collections import Counter
from pathlib import Path

import firmware_py  # noqa: F401
from firmware_py.dsp import feature_index as fi
from firmware_py.store.snapshots import parse
from host_tools.data import units
from host_tools.data.units import m_s2_per_count
from host_tools.link.device_link import add_key_argument, committed_params, connected, raw_frames, read_key
from host_tools.progress import progress_bar
from host_tools.errors import EdgevibError, LinkError
from host_tools.link import DeviceRefused
from host_tools.data.recording import write_wav

HELP = "pull the gateway's event snapshots as WAV + sidecar"
AXIS_NAMES = ("x", "y", "z")


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--port", required=True, help="serial port of the gateway (or the emulator's pty)")
    add_key_argument(p)
    p.add_argument("--out", metavar="DIR", help="folder for the snapshots (made if missing)")
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


def save_event(out: Path, img: bytes, scale: float, board: str) -> Path:
    """Write one snapshot file image as WAV + sidecar in folder out; returns the WAV path."""
    try:
        meta, raw = parse(img)
    except ValueError as e:
        raise LinkError(f"snapshot read from the gateway is damaged ({e})") from None
    n, axes, fs = meta["n"], meta["axes"], meta["fs_hz"]
    sidecar = {
        "m_s2_per_unit": scale,
        "sample_rate_hz": float(fs),
        "axes": list(AXIS_NAMES[:axes]) + [f"a{i}" for i in range(3, axes)],
        "t0_s": meta["t"] - n / fs,
        "source": "edgevib events",
        "board": board,
        "event_id": meta["id"],
        "kind": meta["kind"],
        "t": meta["t"],
        "features": list(meta["features"]),
        "features_summary": summary(list(meta["features"]), axes, scale),
    }
    return write_wav(out / f"event_{meta['id']:05d}_{meta['kind']}.wav", raw_frames(raw, n, axes), fs, sidecar)


def _pull(c, e: dict, out: Path, scale: float, board: str, saved: list, gone: list) -> None:
    """Read event e from the gateway and save it (saved), or note it was overwritten (gone)."""
    try:
        img = c.event_read(e["id"])
    except DeviceRefused as err:
        if err.code != "missing":
            raise
        gone.append(e["id"])
        return
    saved.append(save_event(out, img, scale, board))


def run(args: argparse.Namespace) -> int:
    from host_tools.fleet.layout import CAPTURES, filing_target
    out = filing_target(args.out, args.fleet, args.gateway, CAPTURES, "--out DIR")
    if out.exists() and not out.is_dir():
        raise EdgevibError(f"{out}: exists and is not a folder")
    with connected(args.port, key=read_key(args.key_file)) as c:
        board = c.identify()["board"]
        scale = m_s2_per_count(committed_params(c))
        listed = c.event_list()
        out.mkdir(parents=True, exist_ok=True)
        saved, gone = [], []
        with progress_bar(len(listed), "events", "events") as bar:
            for e in listed:
                _pull(c, e, out, scale, board, saved, gone)
                bar.update(1)
    kinds = Counter(p.stem.rsplit("_", 1)[1] for p in saved)
    detail = ", ".join(f"{v} {k}" for k, v in sorted(kinds.items()))
    print(f"pulled {len(saved)} event snapshots from {args.port} into {out}" + (f" ({detail})" if detail else ""))
    if gone:
        print(f"{len(gone)} listed snapshots were overwritten on the gateway before they could be read: "
              + ", ".join(map(str, gone)))
    return 0
