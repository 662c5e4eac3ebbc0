"""`edgevib record --port PORT --seconds S --out REC.wav`: raw samples from a gateway into WAV
plus sidecar, ready for `check`, `train` and `replay`.

The gateway pushes every window's raw counts while its raw stream is on (docs/protocol.md,
`raw`); each window carries its index and the frames lost just before it, so windows are joined
only where the samples are contiguous. Where windows are missing (the host or the link too slow,
the gateway's ring full, a parameter commit), the recording is split there: REC.wav holds the
first gap-free part, REC_2.wav the next, and so on, each with its own t0_s; the missing windows
are counted and reported. Nothing is ever spliced across a gap. The span recorded is S seconds
of the gateway's sample stream from the first window received.

Sidecar: m_s2_per_unit from the committed set's counts_per_g, sample_rate_hz, axis names, t0_s
from the gateway's clock (to the millisecond of its tick counter; as good as the clock was set),
where it came from (board, firmware, parameter version, first window index), and full_scale
(the converter's, from this host's profile of the board, if it has one).

With --fleet FLEET --gateway ID instead of --out, the recording is filed into that gateway's
archive/ in the fleet folder (host_tools.fleet.layout), named <ID>_<UTC time>.wav.
"""
from __future__ import annotations

import argparse
import math
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from host_tools.data.units import m_s2_per_count
from host_tools.link.device_link import (add_key_argument, board_full_scale, committed_params, connected, raw_frames,
                                         read_key)
from host_tools.progress import start
from host_tools.errors import EdgevibError, LinkError
from host_tools.data.recording import write_wav

HELP = "record raw samples from a gateway into WAV + sidecar"
AXIS_NAMES = ("x", "y", "z")
STALL_S = 5.0          # no raw window for this long: the gateway is not streaming


@dataclass
class Part:
    """A gap-free run of windows: first window index, its start time, the windows' frames."""

    w0: int
    t0_s: float
    windows: list[np.ndarray] = field(default_factory=list)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--port", required=True, help="serial port of the gateway (or the emulator's pty)")
    add_key_argument(p)
    p.add_argument("--seconds", type=float, required=True, metavar="S", help="how long to record")
    p.add_argument("--out", metavar="REC.wav", help="output WAV (sidecar REC.json beside it)")
    p.add_argument("--fleet", metavar="FLEET", help="instead of --out: file into the archive/ of --gateway in this fleet folder")
    p.add_argument("--gateway", metavar="ID", help="with --fleet: the gateway's id (its folder name)")


def part_path(out: Path, k: int) -> Path:
    """Output path of part k (0 = the name given, then _2, _3, ...)."""
    return out if k == 0 else out.with_name(f"{out.stem}_{k + 1}{out.suffix}")


class _Collector:
    """Reassembles raw push chunks into windows and windows into gap-free parts."""

    def __init__(self, n: int, axes: int, fs: int, first_w: int, count: int):
        self.n, self.axes, self.fs = n, axes, fs
        self.first_w = first_w       # windows before this are left from an earlier session
        self.count = count           # windows wanted, from the first one received
        self.start = -1              # index of the first window seen; -1 before any
        self.latest = -1             # highest window index seen, whole or not
        self.parts: list[Part] = []
        self._w = None
        self._buf = bytearray()
        self._meta: dict = {}

    @property
    def done(self) -> bool:
        """The span has been passed: every window of it arrived or never will."""
        if self.start < 0:
            return False
        end = self.start + self.count - 1
        return self.latest > end or (bool(self.parts) and self._last_w() >= end)

    @property
    def missed(self) -> int:
        """Windows of the span that did not arrive whole."""
        got = sum(len(p.windows) for p in self.parts)
        return (min(self.latest, self.start + self.count - 1) - self.start + 1 - got) if self.start >= 0 else 0

    def _last_w(self) -> int:
        p = self.parts[-1]
        return p.w0 + len(p.windows) - 1

    def chunk(self, m: dict) -> None:
        w = m["w"]
        if w < self.first_w:
            return
        if self.start < 0:
            self.start = w
        self.latest = max(self.latest, w)
        if m["off"] == 0:
            self._w, self._buf, self._meta = w, bytearray(m["data"]), m
        elif w == self._w and m["off"] == len(self._buf):
            self._buf += m["data"]
        else:
            self._w = None            # a chunk went missing: this window is lost
            return
        if self._w is not None and len(self._buf) == m["total"]:
            self._window(w, raw_frames(bytes(self._buf), self.n, self.axes), self._meta)
            self._w = None

    def _window(self, w: int, frames: np.ndarray, meta: dict) -> None:
        if w >= self.start + self.count:
            return
        t_end = meta["t_s"] + meta["ms"] / 1000.0
        contiguous = bool(self.parts) and w == self._last_w() + 1 and meta["gap"] == 0
        if not contiguous:
            self.parts.append(Part(w, t_end - self.n / self.fs))
        self.parts[-1].windows.append(frames)


def run(args: argparse.Namespace) -> int:
    if not (args.seconds > 0 and math.isfinite(args.seconds)):
        raise EdgevibError(f"--seconds must be a positive number, not {args.seconds}")
    from host_tools.fleet.layout import ARCHIVE, filing_target
    out = filing_target(args.out, args.fleet, args.gateway, ARCHIVE, "--out REC.wav")
    if args.fleet:   # named for the gateway and the host's UTC time; the sidecar holds the gateway's clock
        out = out / f"{args.gateway}_{time.strftime('%Y%m%dT%H%M%SZ', time.gmtime())}.wav"
    if out.suffix.lower() != ".wav":
        raise EdgevibError(f"{out}: --out must name a .wav file")
    if not out.parent.is_dir():
        raise EdgevibError(f"{out.parent}: no such folder")
    with connected(args.port, key=read_key(args.key_file)) as c:
        info = c.identify()
        scale = m_s2_per_count(committed_params(c))
        n, axes, fs = info["n"], info["axes"], info["fs_hz"]
        frames_wanted = int(round(args.seconds * fs))
        first = c.link.request("raw", on=True)["w"]
        col = _Collector(n, axes, fs, first, math.ceil(frames_wanted / n))
        t_start = time.monotonic()
        bar = start(math.ceil(frames_wanted / n), "windows", "record")
        try:
            last = time.monotonic()
            while not col.done:
                m = c.link.next_push(0.5)
                if m is None:
                    if time.monotonic() - last > STALL_S:
                        raise LinkError(f"no raw window from {args.port} for {STALL_S:g} s "
                                        "(is the gateway sampling?)")
                    continue
                if m.get("push") == "raw":
                    last = time.monotonic()
                    col.chunk(m)
                    bar.update(1)
        finally:
            bar.close()
            try:
                c.link.request("raw", on=False)
            except LinkError:
                pass
        elapsed = time.monotonic() - t_start
    if not col.parts:
        raise LinkError(f"no whole raw window arrived from {args.port} in the span recorded")
    written = _write_parts(out, col, frames_wanted, scale, info)
    total_frames = sum(f for _, f in written)
    names = ", ".join(str(p) for p, _ in written)
    rate_kb = total_frames * axes * 2 / 1000 / elapsed if elapsed > 0 else float("inf")
    print(f"recorded {total_frames / fs:.3f} s ({total_frames} frames x {axes} axes) from {args.port} "
          f"into {names}; {rate_kb:.1f} kB/s over the link")
    if col.missed:       # less than asked for is never a success (exit 3: the link lost them)
        raise LinkError(f"missed {col.missed} windows ({col.missed * n / fs:.3f} s) of the "
                        f"{args.seconds:g} s asked for: written as {len(written)} gap-free parts, "
                        "never joined across a gap")
    return 0


def _write_parts(out: Path, col: _Collector, frames_wanted: int, scale: float,
                 info: dict) -> list[tuple[Path, int]]:
    """Write each part (trimmed to the span asked for) as WAV + sidecar; [(path, frames)]."""
    written = []
    for k, part in enumerate(col.parts):
        counts = np.concatenate(part.windows)
        keep = frames_wanted - (part.w0 - col.start) * col.n
        counts = counts[:keep]
        sidecar = {
            "m_s2_per_unit": scale,
            "sample_rate_hz": float(col.fs),
            "axes": list(AXIS_NAMES[:col.axes]) + [f"a{i}" for i in range(3, col.axes)],
            "t0_s": round(part.t0_s, 3),
            "source": "edgevib record",
            "board": info["board"],
            "firmware": info["fw"],
            "param_version": info["param_version"],
            "first_window": part.w0,
            **board_full_scale(info["board"]),
        }
        written.append((write_wav(part_path(out, k), counts, col.fs, sidecar), len(counts)))
    return written
