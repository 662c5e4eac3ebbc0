"""The stated false-alert rate against continuous healthy running (issue 15's check).

`continuous_check(train_s=3600, test_s=86400, seed_train=1, seed_test=2, progress=None)` -> dict:
train on `train_s` seconds of the stationary healthy pump (host_tools.data.scenarios,
stationary_chunks: mono, 3200 Hz, slowly wandering 1x, 2x, vane-pass and flow levels), written as
six gap-free recordings as an engineer would collect them, then run `test_s` seconds of another
realisation through the same feature twin and device detector, one chunk at a time (bounded
memory for any length; the detector carries over from chunk to chunk, as on the gateway). The
result holds the training's promise, the raises observed per running hour and the verdict of
host_tools.twin.replay.promise_check.

`edgevib bench --continuous-hours H` runs it (24 h: a few minutes on one core). The data are
invented; edgevib is advisory condition monitoring, not machinery protection.
"""
from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Callable

import numpy as np

import firmware_py  # noqa: F401
from firmware_py.detect import alarm as al
from firmware_py.detect.detector import Detector
from host_tools.data.recording import Recording
from host_tools.data.scenarios import StationarySpec, stationary_chunks
from host_tools.fit.training import train
from host_tools.twin.replay import promise_check, step_detector, twin_for

_BOARD = Path(__file__).resolve().parents[2] / "boards" / "desk.json"
_T0 = 1_800_000_000.0


def _profile() -> dict:
    """The desk board with the stationary recording's single radial axis."""
    return dict(json.loads(_BOARD.read_text()), axes=1)


def continuous_check(train_s: float = 3600.0, test_s: float = 86400.0, seed_train: int = 1, seed_test: int = 2,
                     progress: Callable[[float], None] | None = None) -> dict[str, Any]:
    """See the module docstring. progress(fraction) is called after each chunk of the test."""
    spec = StationarySpec()
    profile = _profile()
    scale = spec.sensor.m_s2_per_count
    part = train_s / 6
    recs = []
    for i, c in enumerate(stationary_chunks(seed_train, train_s, part, spec)):
        recs.append(Recording(path=Path(f"stationary_train_{i}.wav"), counts=c, m_s2_per_count=scale,
                              sample_rate_hz=spec.fs_hz, axes=("x",),
                              t0_s=_T0 + i * part, rpm=spec.shaft_hz * 60.0, machine="RW-3",
                              vane_count=spec.vane_count))
    params, summary = train(recs, profile, 1.0, seed=0)
    twin = twin_for(params, profile)
    det = Detector(params, profile["analyse_every"])
    n = params["n"]
    window_s = n / params["fs_hz"]
    raises, pushed, w0, carry = 0, 0, 0, np.zeros((0, 1), np.int16)
    states = np.zeros(len(al.STATE_NAMES), np.int64)
    chunk_s = 600.0
    for k, c in enumerate(stationary_chunks(seed_test, test_s, chunk_s, spec)):
        x = np.concatenate([carry, c])
        w = len(x) // n
        carry = x[w * n:]
        st = step_detector(det, twin.features(x[:w * n]), w0)
        w0 += w
        raises += sum(1 for e in st.events if e[2] in (al.ALERT, al.ALARM) and e[1] not in (al.ALERT, al.ALARM))
        pushed += int(st.pushed.sum())
        states += np.bincount(st.state.astype(np.int64), minlength=len(al.STATE_NAMES))
        if progress is not None:
            progress(min(1.0, (k + 1) * chunk_s / test_s))
    running_h = pushed * window_s / 3600.0
    t = summary["thresholds"]
    return {"train_h": train_s / 3600.0, "test_h": test_s / 3600.0, "running_h": running_h,
            "promised_per_30_days": t.get("expected_false_alerts_per_30_days"),
            "range_95_per_30_days": t.get("range_95_per_30_days"), "supported": t.get("supported"),
            "upper_bound": t.get("upper_bound"),
            "raises": raises, "expected_raises": (t["expected_false_alerts_per_30_days"] * running_h / 720.0
                                                  if t.get("expected_false_alerts_per_30_days") is not None else None),
            "check": promise_check(raises, running_h, params),
            "windows_per_state": {name: int(states[i]) for i, name in enumerate(al.STATE_NAMES)},
            "warnings": summary["warnings"]}
