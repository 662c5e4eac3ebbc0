"""Two parameter sets over the same recordings: what each would have done, side by side.

Entry points: compare(sources, sets, jobs, progress) -> Comparison, where sets are two SetUnderTest
(label, params, profile, expected false alerts per 30 days or None), and compare_results(results,
sets) for replays made elsewhere (the fleet's, on a Dask cluster). compare replays every stream
with host_tools.twin.replay (streaming, bounded memory: only the score track is kept).

Matching. A raising event (into alert, alarm or sensor_fault) of one set is matched with one of
the other set in the same stream, into the same state, whose time differs by at most the longer
persistence span of the two sets (det_persist_ms): within that span the two
detectors are looking at the same evidence, so the raise is the same finding. Raises are paired
in time order, each at most once; the rest are "only in" their set.

Rates. The observed rate is alerts raised per 30 days of running (windows not idle), as the
training's expected rate is counted per 30 days of running. Every alert counts, so the observed
figure is a false-alert rate only where the recordings are of a healthy machine. The expected
rate comes from the training summary beside the set (PARAMS.json), when there is one; it is an
upper bound ("at most") when the set says so (fit_promise_upper, host_tools.twin.replay.promise_check).
Advisory condition monitoring: a set that raises fewer alerts is not thereby safer.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Sequence

import firmware_py  # noqa: F401  (installs the micropython stand-in)
from firmware_py.detect import alarm as al
from host_tools.twin.replay import ReplayResult, replay

RAISES = ("alert", "alarm", "sensor_fault")
DAYS_30_S = 30 * 86400.0


@dataclass
class SetUnderTest:
    """One parameter set to compare: a label (e.g. its file name), the set, its board profile and
    the expected false alerts per 30 days of running from its training (None when unknown)."""

    label: str
    params: dict
    profile: dict
    expected_per_30_days: float | None = None


@dataclass
class Comparison:
    """What compare() found. labels: the two sets' labels (old, new). results: their replays.
    matched: pairs (event of the first set, event of the second) of the same raise. only: per
    label, the raising events the other set does not raise. state_s: per label, seconds in each
    state. rates: per label, {"alerts", "running_s", "observed_per_30_days", "expected_per_30_days"}.
    tolerance_s: the matching span."""

    labels: list[str]
    results: list[ReplayResult]
    matched: list[tuple[dict, dict]]
    only: dict[str, list[dict]]
    state_s: dict[str, dict[str, float]]
    rates: dict[str, dict[str, Any]]
    tolerance_s: float
    sets: list[SetUnderTest] = field(default_factory=list)

    def to_json(self) -> dict[str, Any]:
        """Machine-readable form (the command's --json)."""
        return {
            "sets": self.labels,
            "tolerance_s": self.tolerance_s,
            "events": {lab: r.events for lab, r in zip(self.labels, self.results)},
            "matched": [{"old": a, "new": b} for a, b in self.matched],
            "only": self.only,
            "state_s": self.state_s,
            "rates": self.rates,
            "summary": {lab: r.summary for lab, r in zip(self.labels, self.results)},
        }


def persistence_s(params: dict) -> float:
    """The set's persistence span, seconds (det_persist_ms), at least one window."""
    return max(int(params["det_persist_ms"]) / 1000.0, params["n"] / float(params["fs_hz"]))


def match_raises(a: Sequence[dict], b: Sequence[dict], tolerance_s: float) -> tuple[list[tuple[dict, dict]], list[dict], list[dict]]:
    """Pair raising events of a and b (same stream and new state, times within tolerance_s), in
    time order, each used once; returns (pairs, only in a, only in b)."""
    ra = sorted((e for e in a if e["to"] in RAISES), key=lambda e: e["t_s"])
    rb = sorted((e for e in b if e["to"] in RAISES), key=lambda e: e["t_s"])
    used = [False] * len(rb)
    pairs, only_a = [], []
    for e in ra:
        best = None
        for j, f in enumerate(rb):
            if used[j] or f["stream"] != e["stream"] or f["to"] != e["to"]:
                continue
            d = abs(f["t_s"] - e["t_s"])
            if d <= tolerance_s and (best is None or d < abs(rb[best]["t_s"] - e["t_s"])):
                best = j
        if best is None:
            only_a.append(e)
        else:
            used[best] = True
            pairs.append((e, rb[best]))
    return pairs, only_a, [f for j, f in enumerate(rb) if not used[j]]


def state_seconds(result: ReplayResult, window_s: float) -> dict[str, float]:
    """Seconds of windows in each state over every stream."""
    per = result.summary["total"]["windows_per_state"]
    return {name: per[name] * window_s for name in al.STATE_NAMES}


def rates(result: ReplayResult, window_s: float, expected: float | None, upper: bool = False) -> dict[str, Any]:
    """Alerts raised, running time and the observed rate per 30 days of running (module docstring);
    upper: the expected rate is an upper bound."""
    per = result.summary["total"]["windows_per_state"]
    running_s = (result.summary["total"]["windows"] - per["idle"]) * window_s
    alerts = result.summary["total"]["alerts"]
    return {"alerts": alerts, "running_s": running_s,
            "observed_per_30_days": alerts * DAYS_30_S / running_s if running_s > 0 else None,
            "expected_per_30_days": expected, "expected_upper_bound": upper}


def compare(sources: Sequence[Sequence[Any]], sets: Sequence[SetUnderTest], jobs: int = 1,
            progress: bool = False, names: Sequence[str] | None = None) -> Comparison:
    """Replay the streams `sources` (each as host_tools.twin.replay.StreamReplay takes it, per
    set) through two sets and compare (module docstring). sources may be given per set as a
    pair of lists when the sets read the recordings at different scales."""
    if len(sets) != 2:
        raise ValueError("compare takes two sets")
    per_set = sources if _per_set(sources) else [sources, sources]
    results = [replay(list(src), s.params, s.profile, jobs=jobs, progress=progress, names=names, keep_windows=False)
               for s, src in zip(sets, per_set)]
    return compare_results(results, sets)


def compare_results(results: Sequence[ReplayResult], sets: Sequence[SetUnderTest]) -> Comparison:
    """The comparison of two replays of the same streams, one per set (what compare() returns;
    the fleet runs the replays elsewhere and compares here)."""
    tol = max(persistence_s(s.params) for s in sets)
    pairs, only_a, only_b = match_raises(results[0].events, results[1].events, tol)
    labels = [s.label for s in sets]
    if labels[0] == labels[1]:
        labels = [labels[0] + " (old)", labels[1] + " (new)"]
    win = [s.params["n"] / float(s.params["fs_hz"]) for s in sets]
    return Comparison(
        labels=labels, results=results, matched=pairs, only={labels[0]: only_a, labels[1]: only_b},
        state_s={lab: state_seconds(r, w) for lab, r, w in zip(labels, results, win)},
        rates={lab: rates(r, w, s.expected_per_30_days, bool(s.params.get("fit_promise_upper")))
               for lab, r, w, s in zip(labels, results, win, sets)},
        tolerance_s=tol, sets=list(sets))


def _per_set(sources: Sequence[Any]) -> bool:
    return isinstance(sources, tuple) and len(sources) == 2
