"""The stated false-alert rate against continuous healthy running (issue 15's check).

`continuous_check(train_s=3600, test_s=86400, seed_train=1, seed_test=2, progress=None)` -> dict:
train on `train_s` seconds of the stationary healthy pump (host_tools.data.scenarios,
stationary_chunks: mono, 3200 Hz, slowly wandering 1x, 2x, vane-pass and flow levels), written as
six gap-free recordings as an engineer would collect them, then run `test_s` seconds of another
realisation through the same feature twin and device detector, one chunk at a time (bounded
memory for any length; the detector carries over from chunk to chunk, as on the gateway). The
result holds the training's promise, the raises observed per running hour and the verdict of
host_tools.twin.replay.promise_check.

`edgevib bench --continuous-hours H` runs it (24 h: a few minutes on one core).

`gapless_fault(seed, scale, name, visible_t_s, params, profile, hours)` -> dict: one machine fault
of the evaluation suite as a gateway analysing every window sees it: the history's signal without
a gap (host_tools.data.scenarios.gapless_counts) from `hours` before the fault is clearly visible
(not before its onset) until the first alert or `hours` after, through the feature twin and one
device detector on the board's analyse_every. The scorecard's snapshots are 10 s every half hour
or hour, so their delays include the wait for the next snapshot; this one does not.
`gapless_healthy(seed, scale, name, params, profile, hours)` -> dict: a healthy history's first
`hours` the same way, where every raise is false. `edgevib demo --gapless-hours H` adds both to
the scorecard.

The data are invented; edgevib is advisory condition monitoring, not machinery protection.
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
from host_tools.data.scenarios import AXES, History, StationarySpec, evaluation_suite, gapless_counts, stationary_chunks
from host_tools.data.units import feature_name
from host_tools.fit.training import train
from host_tools.twin.replay import CHUNK_WINDOWS, is_raise, promise_check, step_detector, twin_for

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
    params, summary = train(recs, profile, 1.0)
    twin = twin_for(params, profile)
    det = Detector(params, profile["analyse_every"])
    n = params["n"]
    window_s = n / params["fs_hz"]
    raises, pushed, w0, carry, lead = 0, 0, 0, np.zeros((0, 1), np.int16), None
    states = np.zeros(len(al.STATE_NAMES), np.int64)
    chunk_s = 600.0
    for k, c in enumerate(stationary_chunks(seed_test, test_s, chunk_s, spec)):
        x = np.concatenate([carry, c])
        w = len(x) // n
        carry = x[w * n:]
        st = step_detector(det, twin.features(x[:w * n], lead=lead), w0)
        lead = twin.lead_after(lead, x[:w * n])
        w0 += w
        raises += sum(1 for e in st.events if is_raise(e[1], e[2]))
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


def _gapless_raises(h: History, t0: float, end: float, params: dict, profile: dict, first_only: bool) -> list[dict]:
    """Entries into alert or alarm (dated as the scorecard's events: t_s, from, to, reason,
    feature) of one device detector over history h's gapless signal from t0 to end (or to the
    first, with first_only), on the board's analyse_every. Memory: one chunk of CHUNK_WINDOWS
    analysed windows, whatever the span."""
    twin = twin_for(params, profile)
    every = int(profile["analyse_every"])
    det = Detector(params, every)
    n, fs = params["n"], float(params["fs_hz"])
    axes = AXES[:params["axes"]]
    raises: list[dict] = []
    w0 = 0
    lead = None
    chunks = gapless_counts(h, t0, CHUNK_WINDOWS * every * n)
    t = t0
    while t < end and not (first_only and raises):
        t, counts = next(chunks)
        x = counts[:, :params["axes"]].reshape(CHUNK_WINDOWS * every, n, -1)[::every]
        st = step_detector(det, twin.features(x.reshape(-1, x.shape[2]), lead=lead, follows=every == 1), w0)
        lead = twin.lead_after(lead, x.reshape(-1, x.shape[2])) if every == 1 else None
        for w, old, new, reason, _mode, feat, _score in st.events:
            t_s = t + ((w - w0) * every + 1) * n / fs
            if is_raise(old, new) and t_s <= end:
                raises.append({"t_s": t_s, "from": al.STATE_NAMES[old], "to": al.STATE_NAMES[new],
                               "reason": al.REASON_NAMES[reason],
                               "feature": feature_name(feat, params, axes) if feat >= 0 else None})
        w0 += CHUNK_WINDOWS
        t += len(counts) / fs
    return raises[:1] if first_only else raises


def gapless_fault(seed: int, scale: str, name: str, visible_t_s: float, params: dict, profile: dict,
                  hours: float) -> dict[str, Any]:
    """See the module docstring. Returns {"history", "start_t_s", "end_t_s", "visible_t_s",
    "raised_as" (the first entry into alert or alarm, as the scorecard's events: t_s, from, to,
    reason, feature; None if none by the end), "delay_s" (its time minus visible_t_s), "at_start"
    (raised within the least time a detector started cold needs to raise: the hold-off, the
    steadiness span, the evidence span and twice the slow channel's time constant, a wandering
    feature's when the set has one; so the fault already stood out when the run began, and the
    delay is an upper bound)}."""
    h = next(x for x in evaluation_suite(seed, scale) if x.name == name)
    onset = min(f.onset_t_s for f in h.faults)
    t0 = max(onset, visible_t_s - hours * 3600.0)
    end = visible_t_s + hours * 3600.0
    got = _gapless_raises(h, t0, end, params, profile, first_only=True)
    first = got[0] if got else None
    n, fs, every = params["n"], float(params["fs_hz"]), int(profile["analyse_every"])
    wanders = any(params.get("det_slow_wander") or ())
    slow_ms = max(params.get("det_slow_ms", 0), params.get("det_wander_ms", 0) if wanders else 0)
    warm_s = (params["det_hold_ms"] + params["det_steady_ms"] + params["det_persist_ms"]
              + 2 * slow_ms) / 1000.0 + n * every / fs
    return {"history": name, "start_t_s": t0, "end_t_s": end, "visible_t_s": visible_t_s, "raised_as": first,
            "delay_s": None if first is None else first["t_s"] - visible_t_s,
            "at_start": first is not None and first["t_s"] - t0 <= warm_s}


def gapless_healthy(seed: int, scale: str, name: str, params: dict, profile: dict, hours: float) -> dict[str, Any]:
    """A healthy history of the evaluation suite without a gap for its first `hours` (its stops,
    restarts and speed changes as planned): every entry into alert or alarm is false. Returns
    {"history", "start_t_s", "end_t_s", "running_h" (the plan's running time: shaft turning,
    read each second), "stops" (planned stops that begin in the span), "false_raises" (dated
    events)}."""
    h = next(x for x in evaluation_suite(seed, scale) if x.name == name)
    t0 = h.start_t_s
    end = min(h.end_t_s, t0 + hours * 3600.0)
    running_h = float((h.shaft_hz(np.arange(t0, end, 1.0)) > 0).sum()) / 3600.0
    begins = [next((s[k] for k in ("run_down_t_s", "stopped_t_s", "run_up_t_s") if s[k] is not None), None)
              for s in h.stops]
    stops = sum(1 for b in begins if b is not None and t0 <= b < end)
    return {"history": name, "start_t_s": t0, "end_t_s": end, "running_h": running_h, "stops": stops,
            "false_raises": _gapless_raises(h, t0, end, params, profile, first_only=False)}
