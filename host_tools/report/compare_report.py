"""The comparison of two parameter sets as text and as one HTML page.

Entry points: comparison_text(c) (what `edgevib compare` prints), write_compare_report(out_dir, c)
(index.html and scores.png: both sets' score tracks on shared time and score axes). Times are
UTC with the recording and the offset in it (host_tools.data.times); the plot's time axis counts
from one origin, the first replayed window, which the page states.
"""
from __future__ import annotations

from pathlib import Path
from typing import Sequence

import numpy as np

from firmware_py.detect.alarm import ALARM, ALERT, NORMAL
from host_tools.data.times import moment
from host_tools.report.replay_report import check_report_folder, clock_for, windows_of, write_page
from host_tools.report.style import (
    CSS, DRAW_ORDER, INK, STATE_COLOURS, duration_text, esc, html_table, png, pyplot, style_axes)
from host_tools.twin.compare import RAISES, Comparison
from host_tools.twin.replay import stated_rate

SET_COLOURS = ("#4f6d8a", "#b0603a")   # old: slate blue, new: rust
STATE_LABELS = {"normal": "normal", "alert": "alert", "alarm": "alarm", "idle": "idle (stopped)",
                "sensor_fault": "sensor fault", "learning": "learning"}


def _rate(v: float | None, upper: bool = False) -> str:
    return "unknown" if v is None else stated_rate(v, upper)


def _expected(r: dict) -> str:
    return _rate(r["expected_per_30_days"], r.get("expected_upper_bound", False))


def event_cells(e: dict) -> list[str]:
    """Time (UTC, recording, offset), change, driving feature and score of an event."""
    return [moment(e["t_s"], e.get("recording"), e.get("offset_s")), f"{e['from']} -> {e['to']}",
            e.get("feature") or "-", f"{e['score']:.2f}"]


def summary_line(c: Comparison) -> str:
    """One line: raises per set, matched, and those only one set raises."""
    a, b = c.labels
    ra = sum(e["to"] in RAISES for e in c.results[0].events)
    rb = sum(e["to"] in RAISES for e in c.results[1].events)
    return (f"compare: {a} raises {ra}, {b} raises {rb}; {len(c.matched)} in common, "
            f"{len(c.only[a])} only in {a}, {len(c.only[b])} only in {b}")


def comparison_text(c: Comparison) -> str:
    """The side-by-side text the command prints, ending with the summary line."""
    a, b = c.labels
    w = max(28, *(len(x) for x in c.labels))
    lines = [f"{'':<24}{a:>{w}}  {b:>{w}}"]
    for state in STATE_LABELS:
        lines.append(f"{'time ' + STATE_LABELS[state]:<24}{duration_text(c.state_s[a][state]):>{w}}  "
                     f"{duration_text(c.state_s[b][state]):>{w}}")
    lines.append(f"{'running time observed':<24}{duration_text(c.rates[a]['running_s']):>{w}}  "
                 f"{duration_text(c.rates[b]['running_s']):>{w}}")
    for label, cell in (("alerts raised", lambda r: str(r["alerts"])),
                        ("alerts per 30 d running", lambda r: _rate(r["observed_per_30_days"])),
                        ("expected (training)", _expected)):
        lines.append(f"{label:<24}{cell(c.rates[a]):>{w}}  {cell(c.rates[b]):>{w}}")
    for lab in c.labels:
        for e in c.results[c.labels.index(lab)].events:
            if e["to"] in RAISES:
                lines.append(f"{lab}: " + "  ".join(event_cells(e)))
    for lab in c.labels:
        other = b if lab == a else a
        got = c.only[lab]
        lines.append(f"raised by {lab}, not by {other}: {len(got)}" + ("" if got else " (none)"))
        lines += ["  " + "  ".join(event_cells(e)) for e in got]
    lines.append(f"(raises match within {c.tolerance_s:.2f} s, the longer persistence span; every alert counts "
                 "in the observed rate, a false-alert rate only for healthy recordings)")
    lines.append("advisory condition monitoring, not machinery protection; no alert is no guarantee of health")
    lines.append(summary_line(c))
    return "\n".join(lines) + "\n"


def plot_scores(c: Comparison) -> tuple[bytes, str]:
    """Both sets' score tracks, one panel each, on shared time and score axes; the origin text."""
    tracks = [windows_of(r) for r in c.results]
    t_all = np.concatenate([w.t_s for w in tracks])
    clock = clock_for(float(t_all.min()), float(t_all.max()), "the first window")
    plt = pyplot()
    fig, axs = plt.subplots(2, 1, figsize=(11, 6.2), sharex=True, sharey=True, gridspec_kw={"hspace": 0.12})
    scored = np.concatenate([w.score[w.score > 0] for w in tracks])
    thr = [(s.params["det_thr_alert_q8"] / 256, s.params["det_thr_alarm_q8"] / 256) for s in c.sets]
    top = max([float(scored.max()) if len(scored) else 1.0] + [t[1] for t in thr]) * 2.0
    bottom = min([float(np.percentile(scored, 0.5)) if len(scored) else 0.1] + [t[0] / 4 for t in thr])
    for k, (ax, w, lab) in enumerate(zip(axs, tracks, c.labels)):
        ev = w.score > 0
        for st in DRAW_ORDER:
            m = ev & (w.state == st)
            if m.any():
                ax.scatter(clock(w.t_s[m]), w.score[m], s=4 if st == NORMAL else 7, color=STATE_COLOURS[st],
                           edgecolors="none", rasterized=True, zorder=3)
        alert, alarm = thr[k]
        for v, name, colour in ((alert, "alert", STATE_COLOURS[ALERT]), (alarm, "alarm", STATE_COLOURS[ALARM])):
            ax.axhline(v, color=colour, lw=1.1, ls="--", zorder=4)
            ax.text(1.002, v, f"{name} {v:.2f}", transform=ax.get_yaxis_transform(), color=colour, fontsize=8,
                    va="center", ha="left")
        only = [clock(e["t_s"]) for e in c.only[lab]]
        both = [clock(e["t_s"]) for e in c.results[k].events if e["to"] in RAISES and e not in c.only[lab]]
        if both:
            ax.plot(both, [top / 1.3] * len(both), "v", ms=5, color=INK, label="raised by both sets")
        if only:
            ax.plot(only, [top / 1.3] * len(only), "v", ms=8, color=SET_COLOURS[k], mec=INK, mew=0.6,
                    label="raised by this set only")
        if both or only:
            ax.legend(loc="upper left", frameon=False, fontsize=8)
        ax.set_yscale("log")
        ax.set_ylim(bottom, top)
        ax.set_ylabel("score, spreads")
        ax.set_title(lab, loc="left", fontsize=9.5, color=SET_COLOURS[k])
        style_axes(ax)
    axs[1].set_xlabel(clock.axis_label())
    fig.subplots_adjust(left=0.08, right=0.9, top=0.94, bottom=0.1)
    out = png(fig)
    plt.close(fig)
    origin = moment(clock.origin_s)
    return out, f"Time axis: {clock.unit} since the first replayed window, {origin}."


def _event_rows(events: Sequence[dict]) -> list[list[str]]:
    return [[esc(x) for x in event_cells(e)] for e in events]


def render(c: Comparison) -> tuple[dict[str, bytes], str]:
    """The PNG (name -> bytes) and HTML of the comparison."""
    a, b = c.labels
    scores_png, origin = plot_scores(c)
    rows = [[esc("time " + STATE_LABELS[s]), duration_text(c.state_s[a][s]), duration_text(c.state_s[b][s])] for s in STATE_LABELS]
    rows += [["running time observed", duration_text(c.rates[a]["running_s"]), duration_text(c.rates[b]["running_s"])],
             ["alerts raised", str(c.rates[a]["alerts"]), str(c.rates[b]["alerts"])],
             ["alerts per 30 days of running (observed)", _rate(c.rates[a]["observed_per_30_days"]),
              _rate(c.rates[b]["observed_per_30_days"])],
             ["false alerts per 30 days expected (training)", _expected(c.rates[a]), _expected(c.rates[b])]]
    head = ("time", "change", "driving feature", "score")
    parts = [f"<!doctype html><html lang=en><head><meta charset=utf-8><title>{esc(a)} vs {esc(b)}</title>"
             f"<style>{CSS}</style></head><body>",
             f"<h1>Parameter sets compared: {esc(a)} and {esc(b)}</h1>",
             f"<p class=sub>{esc(summary_line(c))}. {esc(origin)} Times in the tables are UTC, with the "
             "recording and the offset into it.</p>",
             '<p class=caution>Advisory condition monitoring only: not a machinery-protection or safety '
             'shutdown system. Fewer alerts is not the same as a safer set.</p>',
             "<h2>Side by side</h2>", html_table(("", a, b), rows, num=(1, 2)),
             "<p>Every alert counts in the observed rate, so it is a false-alert rate only where the "
             f"recordings are of a healthy machine. Raises of the two sets match within {c.tolerance_s:.2f} s "
             "(the longer persistence span).</p>",
             "<h2>Scores</h2>", '<img src="scores.png" alt="both sets\' scores over time, shared axes">']
    for lab, other in ((a, b), (b, a)):
        parts.append(f"<h2>Raised by {esc(lab)}, not by {esc(other)} ({len(c.only[lab])})</h2>")
        parts.append(html_table(head, _event_rows(c.only[lab]), num=(3,)) if c.only[lab] else "<p>none</p>")
    for k, lab in enumerate(c.labels):
        raised = [e for e in c.results[k].events if e["to"] in RAISES]
        parts.append(f"<h2>Events of {esc(lab)} ({len(c.results[k].events)}, {len(raised)} raising)</h2>")
        parts.append(html_table(head, _event_rows(c.results[k].events), num=(3,)) if c.results[k].events else "<p>none</p>")
    parts.append("</body></html>\n")
    return {"scores.png": scores_png}, "\n".join(parts)


def write_compare_report(out_dir: str | Path, c: Comparison) -> Path:
    """Write index.html and scores.png into out_dir (built aside, moved into place whole)."""
    out = Path(out_dir)
    check_report_folder(out)
    files, page = render(c)
    return write_page(out, files, page)
