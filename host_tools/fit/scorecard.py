"""The scorecard: a detector judged on known histories the way a user judges it.

Input per history: the events of its replay (dicts with t_s, from, to, reason, feature, as
host_tools.twin.replay gives them), the end times of the windows it saw (t_s) and their length,
and its ground truth (host_tools.data.scenarios.ground_truth). Entry points:

- `score_history(events, window_t_s, window_s, truth)` -> dict: one history's figures;
- `scorecard(scored)` -> dict: the figures of many histories, with totals and verdicts against the
  targets of issue 9 (JSON-able);
- `gapless_section(runs, healthy, hours)` -> dict: the card's `gapless` section, from the machine
  faults and the healthy histories run without a gap (host_tools.ops.continuous): the delays and
  false alerts of a gateway that analyses every window, without the wait for the next snapshot;
- `render_text(card)` -> str: the table a person reads (the demo prints it).

What is counted (issue 9, "How to prove it"):
- False raises: entries into alert or alarm from a state that is neither (one alert escalating to
  alarm is one raise), and false entries into sensor_fault, while the history is healthy (before
  its first fault onset). Healthy running time is the observed windows of that span in which the
  pump runs (not between stopped and run-up). Two rates per 30 days: the observed one, and a
  continuous-duty estimate that weights what the recordings caught by how often it happens: raises
  near a stop, restart or speed change per such transient seen, times transients per day of the
  history, plus raises in steady running per hour seen, times running hours per day. A snapshot
  archive over-samples restarts (each has its stretch) and under-samples steady running; the duty
  estimate is what a gateway running around the clock would see if the samples are typical.
- Machine faults: the first raise at or after onset; its delay from the time the fault became
  clearly visible in the signal (negative: earlier). Not detected: no raise before the history ends.
- Sensor faults: from the first corrupted sample, is the first event that names a concern a
  `sensor_fault`, and is there no machine alert or alarm until the span ends (plus a margin)?

This is advisory condition monitoring: a good score on invented histories is no guarantee on a
real machine.
"""
from __future__ import annotations

import math
from typing import Any, Sequence

import numpy as np

DAYS_30_S = 30 * 86400.0
TARGET_FALSE_PER_30_DAYS = 1.0      # issue 9: at most 1 false alert or alarm per 30 days
TARGET_MAX_DELAY_S = 7200.0         # issue 9: none more than 2 h after clearly visible
TRANSIENT_AFTER_S = 120.0           # a raise this soon after a ramp ends is blamed on the transient
SENSOR_MARGIN_S = 600.0             # machine alerts this long after a sensor-fault span still count
_RAISED = ("alert", "alarm")


def _raises(events: Sequence[dict]) -> list[dict]:
    return [e for e in events if e["to"] in _RAISED and e["from"] not in _RAISED]


def _transients(truth: dict) -> list[tuple[float, float, str]]:
    """Time spans of run-downs, stopped time, run-ups and speed changes (+ TRANSIENT_AFTER_S)."""
    out = []
    for s in truth["stops"]:
        if s["run_down_t_s"] is not None:
            out.append((s["run_down_t_s"], s["stopped_t_s"] + TRANSIENT_AFTER_S, "run-down"))
        out.append((s["run_up_t_s"], s["steady_t_s"] + TRANSIENT_AFTER_S, "run-up"))
    for c in truth["speed_changes"]:
        out.append((c["t_s"], c["end_t_s"] + TRANSIENT_AFTER_S, f"speed change ({c['kind']})"))
    return out


def _stopped(truth: dict) -> list[tuple[float, float]]:
    return [(s["stopped_t_s"], s["run_up_t_s"]) for s in truth["stops"] if s["stopped_t_s"] is not None]


def _inside(t: np.ndarray, spans: Sequence[tuple]) -> np.ndarray:
    m = np.zeros(len(t), bool)
    for a, b, *_ in spans:
        m |= (t >= a) & (t < b)
    return m


def score_history(events: Sequence[dict], window_t_s: np.ndarray, window_s: float, truth: dict) -> dict[str, Any]:
    """The figures of one history (see the module docstring); times in Unix s, durations in s."""
    t = np.asarray(window_t_s, dtype=np.float64)
    t_win0 = t - window_s                                   # window start
    healthy_end = truth["healthy_until_t_s"]
    trans = _transients(truth)
    stopped = _stopped(truth)
    in_healthy = t <= healthy_end
    running = ~_inside(t, stopped) & ~_inside(t_win0, stopped)
    in_trans = _inside(t, trans)
    healthy_events = [e for e in events if e["t_s"] <= healthy_end]
    false = _raises(healthy_events)
    false_sf = [e for e in healthy_events if e["to"] == "sensor_fault"]
    span_h = max(0.0, min(healthy_end, truth["end_t_s"]) - truth["start_t_s"])
    stopped_s = sum(max(0.0, min(b, healthy_end) - max(a, truth["start_t_s"])) for a, b in stopped)
    seen_trans = [s for s in trans if s[0] < healthy_end and np.any((t > s[0]) & (t_win0 < s[1]))]
    all_trans = [s for s in trans if s[0] < healthy_end]
    false_tr = [e for e in false if _inside(np.array([e["t_s"]]), trans)[0]]
    steady_s = float(np.sum(in_healthy & running & ~in_trans)) * window_s
    out: dict[str, Any] = {
        "history": truth["history"], "machine": truth["machine"], "role": truth["role"],
        "healthy": {
            "observed_running_s": float(np.sum(in_healthy & running)) * window_s,
            "observed_steady_s": steady_s,
            "span_s": span_h, "running_s": span_h - stopped_s,
            "transients": len(all_trans), "transients_seen": len(seen_trans),
            "false_raises": [_brief(e) for e in false],
            "false_raises_in_transients": len(false_tr),
            "false_sensor_faults": [_brief(e) for e in false_sf],
        },
        "machine_faults": [], "sensor_faults": [],
    }
    for f in truth["machine_faults"]:
        first = next((e for e in _raises(events) if e["t_s"] >= f["onset_t_s"]), None)
        before = _raises([e for e in events if e["t_s"] < f["onset_t_s"]])
        vis = f["visible_t_s"]
        out["machine_faults"].append({
            "kind": f["kind"], "onset_t_s": f["onset_t_s"], "visible_t_s": vis, "visible_by": f["visible_by"],
            "first_raise_t_s": None if first is None else first["t_s"],
            "raised_as": None if first is None else _brief(first),
            "delay_s": None if first is None or vis is None else first["t_s"] - vis,
            "raised_before_onset": len(before),
        })
    hits = truth.get("sensor_fault_hits", [])
    for f in truth["sensor_faults"]:
        mine = [h for h in hits if f["start_t_s"] <= h["t_s"] < f["end_t_s"]]
        t_hit = min((h["t_s"] for h in mine), default=None)
        row: dict[str, Any] = {"kind": f["kind"], "start_t_s": f["start_t_s"], "end_t_s": f["end_t_s"],
                               "first_hit_t_s": t_hit, "hits": len(mine)}
        if t_hit is not None:
            after = [e for e in events if t_hit - window_s <= e["t_s"] <= f["end_t_s"] + SENSOR_MARGIN_S]
            first = next((e for e in after if e["to"] in ("sensor_fault",) + _RAISED), None)
            machine = [e for e in _raises(after)]
            sf = next((e for e in after if e["to"] == "sensor_fault"), None)
            row.update({"first_concern": None if first is None else _brief(first),
                        "sensor_fault_first": first is not None and first["to"] == "sensor_fault",
                        "sensor_fault_delay_s": None if sf is None else sf["t_s"] - t_hit,
                        "machine_raises": [_brief(e) for e in machine]})
        out["sensor_faults"].append(row)
    return out


def _brief(e: dict) -> dict:
    return {"t_s": e["t_s"], "from": e["from"], "to": e["to"], "reason": e["reason"], "feature": e.get("feature")}


def scorecard(scored: Sequence[dict], label: str = "") -> dict[str, Any]:
    """Totals and verdicts over scored histories (score_history results)."""
    h = [s["healthy"] for s in scored]
    n_false = sum(len(x["false_raises"]) for x in h)
    n_false_tr = sum(x["false_raises_in_transients"] for x in h)
    obs = sum(x["observed_running_s"] for x in h)
    steady = sum(x["observed_steady_s"] for x in h)
    seen = sum(x["transients_seen"] for x in h)
    trans_per_s = sum(x["transients"] for x in h) / max(1.0, sum(x["span_s"] for x in h))
    run_frac = sum(x["running_s"] for x in h) / max(1.0, sum(x["span_s"] for x in h))
    # Continuous duty: raises per transient seen x transients per 30 days, plus raises per steady
    # second seen x running seconds per 30 days.
    duty = ((n_false_tr / seen if seen else 0.0) * trans_per_s * DAYS_30_S
            + ((n_false - n_false_tr) / steady if steady else 0.0) * run_frac * DAYS_30_S)
    mf = [dict(f, history=s["history"], machine=s["machine"]) for s in scored for f in s["machine_faults"]]
    sf = [dict(f, history=s["history"], machine=s["machine"]) for s in scored for f in s["sensor_faults"]]
    delays = [f["delay_s"] for f in mf if f["delay_s"] is not None]
    detected = sum(f["first_raise_t_s"] is not None for f in mf)
    sf_ok = sum(bool(f.get("sensor_fault_first")) and not f.get("machine_raises") for f in sf)
    card = {
        "label": label,
        "healthy": {
            "histories": len(scored), "observed_running_h": obs / 3600.0, "observed_steady_h": steady / 3600.0,
            "transients_seen": seen, "transients_per_day": trans_per_s * 86400.0, "running_fraction": run_frac,
            "false_raises": n_false, "false_raises_in_transients": n_false_tr,
            "false_sensor_faults": sum(len(x["false_sensor_faults"]) for x in h),
            "per_30_days_observed": n_false / obs * DAYS_30_S if obs else None,
            "per_30_days_duty": duty if obs else None,
            "target_per_30_days": TARGET_FALSE_PER_30_DAYS,
        },
        "machine_faults": mf,
        "machine_summary": {
            "faults": len(mf), "detected": detected,
            "median_delay_s": float(np.median(delays)) if delays else None,
            "max_delay_s": max(delays) if delays else None,
            "target_max_delay_s": TARGET_MAX_DELAY_S,
        },
        "sensor_faults": sf,
        "sensor_summary": {"faults": len(sf), "sensor_fault_first_and_no_machine_alert": sf_ok},
    }
    hh = card["healthy"]
    ms = card["machine_summary"]
    card["verdicts"] = {
        "false_raises": hh["per_30_days_duty"] is not None and hh["per_30_days_duty"] <= TARGET_FALSE_PER_30_DAYS,
        "every_machine_fault_detected": detected == len(mf),
        "median_delay_not_after_visible": ms["median_delay_s"] is not None and ms["median_delay_s"] <= 0.0,
        "no_delay_over_2_h": bool(delays) and len(delays) == len(mf) and max(delays) <= TARGET_MAX_DELAY_S,
        "every_sensor_fault_named_first": sf_ok == len(sf),
    }
    return card


def gapless_section(runs: Sequence[dict], healthy: Sequence[dict], hours: float) -> dict[str, Any]:
    """The `gapless` section: each fault run (gapless_fault's dict), and the median and worst
    delay over all of them, a fault not raised by `hours` after clearly visible counting as later
    than that (median None if that is half of them or more, worst None if any); each healthy run
    (gapless_healthy's dict), with the false raises per 30 days of running."""
    d = sorted(math.inf if r["delay_s"] is None else r["delay_s"] for r in runs)
    med = float(np.median(d)) if d else math.inf
    run_h = sum(r["running_h"] for r in healthy)
    n_false = sum(len(r["false_raises"]) for r in healthy)
    return {"hours": hours, "faults": list(runs), "raised": sum(r["delay_s"] is not None for r in runs),
            "median_delay_s": med if math.isfinite(med) else None,
            "max_delay_s": d[-1] if d and math.isfinite(d[-1]) else None,
            "healthy": list(healthy), "healthy_running_h": run_h, "false_raises": n_false,
            "per_30_days": n_false / run_h * 720.0 if run_h > 0 else None}


def _dur(s: float | None) -> str:
    if s is None:
        return "-"
    sign = "-" if s < 0 else "+"
    a = abs(s)
    if a < 120:
        return f"{sign}{a:.0f} s"
    if a < 2 * 3600:
        return f"{sign}{a / 60:.0f} min"
    return f"{sign}{a / 3600:.1f} h"


def _rate(x: float | None) -> str:
    return "-" if x is None else f"{x:.2f}"


def _what(e: dict | None) -> str:
    if e is None:
        return "-"
    return f"{e['to']} ({e['reason']}{', ' + e['feature'] if e.get('feature') else ''})"


def render_text(card: dict) -> str:
    """The scorecard as a plain-text table."""
    hh, ms, ss, v = card["healthy"], card["machine_summary"], card["sensor_summary"], card["verdicts"]
    ok = {True: "meets target", False: "MISSES target"}
    lines = [f"Scorecard{': ' + card['label'] if card['label'] else ''}",
             f"  healthy running: {hh['histories']} histories, {hh['observed_running_h']:.1f} h observed "
             f"({hh['observed_steady_h']:.1f} h steady, {hh['transients_seen']} stops/restarts/speed changes seen; "
             f"{hh['transients_per_day']:.1f} per day, running {100 * hh['running_fraction']:.0f} % of the time)",
             f"    false alerts and alarms: {hh['false_raises']} ({hh['false_raises_in_transients']} at transients); "
             f"per 30 days: {_rate(hh['per_30_days_observed'])} observed, {_rate(hh['per_30_days_duty'])} in continuous duty "
             f"(target <= {hh['target_per_30_days']:g}: {ok[v['false_raises']]}); false sensor faults: {hh['false_sensor_faults']}",
             "  machine faults (delay = first alert - clearly visible; negative = earlier):",
             f"    {'history':<28} {'clearly visible by':<28} {'delay':>9}  first raise"]
    for f in card["machine_faults"]:
        lines.append(f"    {f['history']:<28} {(f['visible_by'] or 'never'):<28} "
                     f"{(_dur(f['delay_s']) if f['first_raise_t_s'] is not None else 'MISSED'):>9}  {_what(f['raised_as'])}"
                     + (f"  [{f['raised_before_onset']} raise(s) before onset]" if f["raised_before_onset"] else ""))
    lines.append(f"    detected {ms['detected']}/{ms['faults']}; median delay {_dur(ms['median_delay_s'])}, "
                 f"worst {_dur(ms['max_delay_s'])} (targets: all detected, median <= 0, none over +2 h: "
                 f"{ok[v['every_machine_fault_detected'] and v['median_delay_not_after_visible'] and v['no_delay_over_2_h']]})")
    if "gapless" in card:
        g = card["gapless"]
        lines.append(f"  without a gap (every window, as a gateway sees them): each fault from {g['hours']:g} h before "
                     f"clearly visible, or its onset, to the first alert or {g['hours']:g} h after:")
        for r in g["faults"]:
            d = "not yet" if r["raised_as"] is None else ("<= " if r["at_start"] else "") + _dur(r["delay_s"])
            lines.append(f"    {r['history']:<28} {'run from ' + _dur(r['start_t_s'] - r['visible_t_s']):<28} "
                         f"{d:>10}  {_what(r['raised_as'])}" + ("  (raised as soon as it could: the fault already stood "
                                                              "out when the run began)" if r["at_start"] else ""))
        late = f"over +{g['hours']:g} h"
        lines.append(f"    raised {g['raised']}/{len(g['faults'])} within {g['hours']:g} h; median delay "
                     f"{_dur(g['median_delay_s']) if g['median_delay_s'] is not None else late}, "
                     f"worst {_dur(g['max_delay_s']) if g['max_delay_s'] is not None else late}")
        if g["healthy"]:
            lines.append(f"    and each healthy history's first {2 * g['hours']:g} h:")
        for r in g["healthy"]:
            lines.append(f"    {r['history']:<28} {(r['end_t_s'] - r['start_t_s']) / 3600:.1f} h, {r['running_h']:.1f} h "
                         f"running, {r['stops']} stop(s): {len(r['false_raises'])} false alert(s) and alarm(s)"
                         + "".join(f"; {_dur(e['t_s'] - r['start_t_s'])} in: {_what(e)}" for e in r["false_raises"][:3]))
        if g["healthy"]:
            lines.append(f"    false alerts and alarms: {g['false_raises']} in {g['healthy_running_h']:.1f} h of running "
                         f"({_rate(g['per_30_days'])} per 30 days)")
    lines.append("  sensor faults (first concern after the first corrupted sample):")
    for f in card["sensor_faults"]:
        if f["first_hit_t_s"] is None:
            lines.append(f"    {f['history']:<28} no corrupted sample recorded")
            continue
        verdict = "ok" if f["sensor_fault_first"] and not f["machine_raises"] else "WRONG"
        lines.append(f"    {f['history']:<28} first: {_what(f['first_concern'])}; machine raises: {len(f['machine_raises'])}  {verdict}")
    lines.append(f"    named first with no machine alert: {ss['sensor_fault_first_and_no_machine_alert']}/{ss['faults']} "
                 f"({ok[v['every_sensor_fault_named_first']]})")
    return "\n".join(lines)
