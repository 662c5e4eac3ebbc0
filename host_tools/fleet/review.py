"""What the fleet review says about each pump, from its replay: the row of the fleet page.

Entry points: digest(result, healthy, info, origin_s) is the task that boils one gateway's
replay down to its row (JSON-able, small, so a year of windows never travels to the client);
severity(row) ranks a row; SEVERITIES names the ranks.

A row holds:
- state_now: the detector state of the last replayed window, with its time and the velocity
  r.m.s. (mm/s, largest axis) and ISO zone of that window;
- events: the transitions into alert, alarm or sensor_fault over the period;
- alert rate: alerts raised per 30 days of running, as `edgevib compare` counts it
  (host_tools.twin.compare.rates), against the expected false alerts per 30 days from the set's
  training summary. Every alert counts, a real fault's too: a rate far above the expectation
  means faults, or a set that no longer fits;
- drift: the median detector score (spreads of the nearest learned mode) of the scored windows of
  the last DRIFT_DAYS of the period, divided by the median score of the same set on the pump's own
  healthy recordings (healthy/), or, without those, on the first DRIFT_DAYS of the period. 1 means
  the pump sits where it sat when its normal was learned; per week too, for the page's plot;
- the parameter set's age at the end of the period (from params_since in the manifest) and whether
  it predates the last overhaul (an overhaul changes the machine the set was learned on);
- worst state per UTC day, for the page's overview.
"""
from __future__ import annotations

import math
from datetime import date
from typing import Any

import numpy as np

from host_tools.fleet import layout
from host_tools.twin.replay import stated_rate

_DAY_S = 86400.0
DRIFT_DAYS = 7.0
DRIFT_FLAG = 2.0   # a screening level of our choosing: the typical window twice as far from normal as at training
RATE_FLAG = 3.0    # observed alerts over three times the expected rate (training's own warning factor)
# Worst first when a day holds several states.
# every detector state (firmware_py.detect.alarm.STATE_NAMES), least to most severe
_WORST = {"idle": 0, "learning": 1, "unscored": 2, "normal": 3, "alert": 4, "sensor_fault": 5, "alarm": 6}
SEVERITIES = {5: "unreadable", 4: "alarm", 3: "alert", 2: "look", 1: "quiet"}
_RAISES = ("alert", "alarm", "sensor_fault")


def digest(result: Any, healthy: Any, info: dict[str, Any], origin_s: float) -> dict[str, Any]:
    """One gateway's row (task). result: its archive replay (a one-stream ReplayResult of
    host_tools.twin.replay); healthy: the replay of its healthy recordings with the same set, or
    None. info: gateway,
    pump, site, board, overhauls and params_since (ISO dates or None), params version, expected
    false alerts per 30 days (or None), window_s, report (link). origin_s: the page's day 0 (Unix s)."""
    from host_tools.twin.compare import rates
    w = result.windows
    t, state, score, mode = w["t_s"], w["state"], w["score"], w["mode"]
    window_s = info["window_s"]
    events = [e for e in result.events if e["to"] in _RAISES]
    rate = rates(result, window_s, info.get("expected_per_30_days"), info.get("expected_upper_bound", False))
    t_last = float(t[-1])
    ref, ref_name = _reference(healthy, t, score, mode)
    recent = (mode >= 0) & (t > t_last - DRIFT_DAYS * _DAY_S)
    drift = float(np.median(score[recent]) / ref) if ref and recent.any() else None
    weeks = []
    if ref:
        wk = np.floor((t - origin_s) / (7 * _DAY_S)).astype(np.int64)
        for k in np.unique(wk[mode >= 0]).tolist():
            sel = (wk == k) & (mode >= 0)
            weeks.append([int(k), float(np.median(score[sel]) / ref)])
    day = np.floor((t - origin_s) / _DAY_S).astype(np.int64)
    rank = np.array([_WORST[s] for s in state.tolist()], np.int64)
    worst: dict[int, int] = {}
    for d, r in zip(day.tolist(), rank.tolist()):
        worst[d] = max(worst.get(d, 0), r)
    names = {v: k for k, v in _WORST.items()}
    since, overhauls = info.get("params_since"), info.get("overhauls") or []
    age = (t_last - _date_s(since)) / _DAY_S if since else None
    last_oh = max((o for o in overhauls if _date_s(o) <= t_last), default=None)
    row = {k: info.get(k) for k in ("gateway", "pump", "site", "board", "params_version", "params_since", "report")}
    row.update({
        "error": None,
        "windows": int(len(t)), "recordings": len(result.recordings[0]),
        "t_first_s": float(t[0]), "t_last_s": t_last,
        "state_now": str(state[-1]), "velocity_now_mm_s": float(w["velocity_rms_mm_s"][-1]), "zone_now": str(w["zone"][-1]),
        "events": [{k: e[k] for k in ("t_s", "from", "to", "reason", "feature", "score")} for e in events],
        "alerts": sum(e["to"] == "alert" for e in events), "alarms": sum(e["to"] == "alarm" for e in events),
        "sensor_faults": sum(e["to"] == "sensor_fault" for e in events),
        "running_h": rate["running_s"] / 3600.0,
        "alerts_per_30_days": rate["observed_per_30_days"],
        "expected_per_30_days": info.get("expected_per_30_days"),
        "expected_upper_bound": info.get("expected_upper_bound", False),
        "drift": drift, "drift_reference": ref_name, "drift_weeks": weeks,
        "params_age_days": age, "last_overhaul": last_oh,
        "params_before_overhaul": bool(since and last_oh and since < last_oh) if since else None,
        "worst_per_day": [[d, names[r]] for d, r in sorted(worst.items())],
    })
    row["severity"], row["reasons"] = severity(row)
    return row


def error_row(info: dict[str, Any], message: str) -> dict[str, Any]:
    """The row of a gateway whose folder or replay failed: its one-line reason."""
    row = {k: info.get(k) for k in ("gateway", "pump", "site", "board")}
    row.update({"error": message, "events": [], "worst_per_day": [], "drift_weeks": []})
    row["severity"], row["reasons"] = severity(row)
    return row


def severity(row: dict[str, Any]) -> tuple[int, list[str]]:
    """(rank, reasons): 5 unreadable, 4 alarm (now or in the period), 3 alert or sensor fault (now
    or in the period), 2 look (set older than the last overhaul, drift >= DRIFT_FLAG, alert rate
    over RATE_FLAG times the expected), 1 quiet."""
    if row.get("error"):
        return 5, [row["error"]]
    reasons = []
    rank = 1
    if row["state_now"] == "alarm" or row["alarms"]:
        rank = 4
        reasons.append("alarm now" if row["state_now"] == "alarm" else f"{row['alarms']} alarm(s) in the period")
    if row["state_now"] in ("alert", "sensor_fault") or row["alerts"] or row["sensor_faults"]:
        rank = max(rank, 3)
        if row["state_now"] in ("alert", "sensor_fault"):
            reasons.append(f"{row['state_now'].replace('_', ' ')} now")
        if row["alerts"]:
            reasons.append(f"{row['alerts']} alert(s) in the period")
        if row["sensor_faults"]:
            reasons.append(f"{row['sensor_faults']} sensor fault(s) in the period")
    if row.get("params_before_overhaul"):
        rank = max(rank, 2)
        reasons.append(f"parameter set older than the overhaul of {row['last_overhaul']}")
    if row.get("drift") is not None and row["drift"] >= DRIFT_FLAG:
        rank = max(rank, 2)
        reasons.append(f"drifted: typical score {row['drift']:.1f} x its healthy level")
    exp, obs = row.get("expected_per_30_days"), row.get("alerts_per_30_days")
    if exp and obs is not None and obs > RATE_FLAG * exp:
        rank = max(rank, 2)
        reasons.append(f"{obs:.1f} alerts per 30 days against {stated_rate(exp, bool(row.get('expected_upper_bound')))} expected")
    return rank, reasons


def _reference(healthy: dict | None, t: np.ndarray, score: np.ndarray, mode: np.ndarray) -> tuple[float | None, str]:
    """Median score of the reference windows, and what they are."""
    if healthy is not None:
        hw = healthy.windows
        sel = hw["mode"] >= 0
        if sel.any():
            return float(np.median(hw["score"][sel])) or None, "its healthy recordings"
    first = (mode >= 0) & (t < t[0] + DRIFT_DAYS * _DAY_S)
    if first.any():
        return float(np.median(score[first])) or None, f"the first {DRIFT_DAYS:g} days of the period"
    return None, "none"


def _date_s(iso: str) -> float:
    return layout.date_t_s(date.fromisoformat(iso))


def finite(v: Any) -> bool:
    """A number that is not None nor nan."""
    return v is not None and not (isinstance(v, float) and math.isnan(v))
