"""The fleet review page: one HTML page, a row per pump, and the plots a person would rather look at.

Entry point: render(rows, meta) -> (files {name: bytes}, html text). rows: host_tools.fleet.review
rows (one per gateway, errors included). meta: fleet name, origin_s (day 0 of the plots, Unix s),
period (first and last time replayed), created (UTC text).

Plots (matplotlib, every report's palette and style, host_tools.report.style):
- overview.png: the worst detector state of each pump on each UTC day of the period, pumps in the
  table's order (most severe on top); blank where no window was replayed that day;
- drift.png: per pump, the weekly median score against its healthy level (ratio, log scale),
  with the screening line at review.DRIFT_FLAG;
- rates.png: per pump, alerts per 30 days of running observed over the period (bar) against the
  false alerts its training expected (mark).
The table sorts by any column (click its head) and filters by severity; a pump links to its own
replay report. A little inline JavaScript does the sorting and filtering; without it the table is
still complete, sorted by severity.
"""
from __future__ import annotations

from datetime import datetime, timezone
from typing import Any, Sequence

import numpy as np

from firmware_py.detect.alarm import STATE_NAMES
from host_tools.fleet.review import DRIFT_FLAG, SEVERITIES
from host_tools.report.style import CSS, INK, MUTED, STATE_COLOURS, esc, png, pyplot, state_tag, style_axes
from host_tools.twin.replay import stated_rate

_SEV_COLOURS = {5: "#7356a3", 4: "#b8372a", 3: "#e3a32b", 2: "#4f88b4", 1: "#8fbf9f"}
_CODE = {name: i for i, name in enumerate(STATE_NAMES)}


def ordered(rows: Sequence[dict]) -> list[dict]:
    """Most severe first, then by site and pump."""
    return sorted(rows, key=lambda r: (-r["severity"], r.get("site") or "", r.get("pump") or r["gateway"]))


def render(rows: Sequence[dict], meta: dict[str, Any]) -> tuple[dict[str, bytes], str]:
    """The PNGs and the page (see the module docstring)."""
    rows = ordered(rows)
    ok = [r for r in rows if not r.get("error")]
    files = {}
    if ok:
        files["overview.png"] = plot_overview(ok, meta["origin_s"])
        files["drift.png"] = plot_drift(ok, meta["origin_s"])
        files["rates.png"] = plot_rates(ok)
    return files, _page(rows, meta, files)


def _label(r: dict) -> str:
    return f"{r.get('pump') or r['gateway']} ({r.get('site') or '?'})"


def _origin_text(origin_s: float) -> str:
    return datetime.fromtimestamp(origin_s, timezone.utc).strftime("%Y-%m-%d %H:%M UTC")


def plot_overview(rows: Sequence[dict], origin_s: float) -> bytes:
    """Worst state per pump and day."""
    plt = pyplot()
    from matplotlib.colors import ListedColormap
    days = max((d for r in rows for d, _ in r["worst_per_day"]), default=0) + 1
    grid = np.full((len(rows), days), np.nan)
    for i, r in enumerate(rows):
        for d, s in r["worst_per_day"]:
            grid[i, d] = _CODE[s]
    cmap = ListedColormap([STATE_COLOURS[i] for i in range(len(STATE_NAMES))])
    fig, ax = plt.subplots(figsize=(11, 0.8 + 0.32 * len(rows)), layout="constrained")
    ax.imshow(grid, aspect="auto", interpolation="nearest", cmap=cmap, vmin=-0.5, vmax=len(STATE_NAMES) - 0.5,
              extent=(0, days, len(rows), 0))
    ax.set_yticks(np.arange(len(rows)) + 0.5, [_label(r) for r in rows])
    ax.set_xlabel(f"days since {_origin_text(origin_s)}")
    ax.set_title("Worst detector state per pump and UTC day (blank: nothing replayed that day)", color=INK, loc="left")
    seen = sorted({_CODE[s] for r in rows for _, s in r["worst_per_day"]})
    from matplotlib.patches import Patch
    fig.legend(handles=[Patch(color=STATE_COLOURS[c], label=STATE_NAMES[c]) for c in seen], loc="outside lower center",
               ncols=len(seen), frameon=False)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    data = png(fig)
    plt.close(fig)
    return data


def plot_drift(rows: Sequence[dict], origin_s: float) -> bytes:
    """Weekly median score over the healthy level, one small panel per pump."""
    plt = pyplot()
    from matplotlib.ticker import MaxNLocator
    cols = min(4, len(rows))
    nrow = -(-len(rows) // cols)
    fig, axs = plt.subplots(nrow, cols, figsize=(11, 0.6 + 1.9 * nrow), sharex=True, sharey=True,
                            layout="constrained", squeeze=False)
    top = max([v for r in rows for _, v in r["drift_weeks"]] + [DRIFT_FLAG * 1.5])
    for ax, r in zip(axs.flat, rows):
        wk = np.array(r["drift_weeks"], float).reshape(-1, 2)
        ax.set_yscale("log")
        ax.axhline(1.0, color=MUTED, lw=0.8)
        ax.axhline(DRIFT_FLAG, color=_SEV_COLOURS[2], lw=0.9, ls="--")
        if len(wk):
            ax.plot(wk[:, 0] + 1, wk[:, 1], "o-", color=INK, ms=3, lw=1.2)
        ax.set_ylim(0.5, top * 1.2)
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_title(_label(r), fontsize=9, loc="left", color=_SEV_COLOURS[r["severity"]] if r["severity"] >= 3 else INK)
        style_axes(ax)
    for ax in axs.flat[len(rows):]:
        ax.set_visible(False)
    fig.supxlabel(f"week since {_origin_text(origin_s)}")
    fig.supylabel("score / healthy (ratio)")
    fig.suptitle(f"How far each pump sits from its learned normal, week by week (dashed: {DRIFT_FLAG:g} x, flagged)",
                 color=INK, x=0.01, ha="left")
    data = png(fig)
    plt.close(fig)
    return data


def plot_rates(rows: Sequence[dict]) -> bytes:
    """Observed alerts per 30 days of running against the expected false alerts."""
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(9, 0.9 + 0.32 * len(rows)), layout="constrained")
    y = np.arange(len(rows))
    obs = [r["alerts_per_30_days"] or 0.0 for r in rows]
    ax.barh(y, obs, color=[_SEV_COLOURS[r["severity"]] for r in rows], height=0.6, label="observed (every alert, real faults too)")
    # an upper bound ("at most", training on thin data) as a left-pointing mark: the rate lies at or under it
    for upper, mark, label in ((False, "D", "expected false alerts (training)"),
                               (True, "<", "at most this many false alerts (training, an upper bound)")):
        exp = [(i, r["expected_per_30_days"]) for i, r in enumerate(rows)
               if r.get("expected_per_30_days") is not None and bool(r.get("expected_upper_bound")) == upper]
        if exp:
            ax.plot([e for _, e in exp], [i for i, _ in exp], mark, color=INK, ms=5, label=label)
    ax.set_yticks(y, [_label(r) for r in rows])
    ax.invert_yaxis()
    ax.set_xscale("symlog", linthresh=1.0)
    ax.set_xlabel("alerts per 30 days of running (symmetric log scale, linear below 1)")
    ax.set_title("Alert rate over the period against what training expected", color=INK, loc="left")
    ax.legend(loc="lower right", frameon=False)
    style_axes(ax)
    data = png(fig)
    plt.close(fig)
    return data


# --- the page ---------------------------------------------------------------------------------------

def _num(v: Any, fmt: str) -> tuple[str, str]:
    """(text, sort key) of a number that may be missing."""
    if v is None:
        return "-", ""
    return format(v, fmt), repr(float(v))


def _utc(t: float) -> str:
    return datetime.fromtimestamp(t, timezone.utc).strftime("%Y-%m-%d %H:%M UTC")


def _row(r: dict) -> str:
    sev = r["severity"]
    tag = (f'<span class=st style="background:{_SEV_COLOURS[sev]};color:{"#fff" if sev in (4, 5) else INK}">'
           f'{esc(SEVERITIES[sev])}</span>')
    name = esc(r.get("pump") or r["gateway"])
    if r.get("report"):
        name = f'<a href="{esc(r["report"])}">{name}</a>'
    cells = [(tag, str(sev)), (name, esc(r.get("pump") or "")), (esc(r.get("site") or "-"), esc(r.get("site") or "")),
             (esc(r["gateway"]), esc(r["gateway"]))]
    if r.get("error"):
        cells.append((f'<span class=err>{esc(r["error"])}</span>', ""))
        return (f'<tr data-sev="{sev}">' + "".join(f'<td data-k="{k}">{c}</td>' for c, k in cells)
                + '<td colspan=6></td></tr>')
    now = f'{state_tag(r["state_now"])} {r["velocity_now_mm_s"]:.2f} mm/s, zone {esc(r["zone_now"])}'
    ev = f'{r["alarms"]} / {r["alerts"]} / {r["sensor_faults"]}'
    obs, obs_k = _num(r["alerts_per_30_days"], ".2f")
    e = r["expected_per_30_days"]
    exp = "-" if e is None else stated_rate(e, bool(r.get("expected_upper_bound")))
    drift, drift_k = _num(r["drift"], ".2f")
    age, age_k = _num(r["params_age_days"], ".0f")
    if r.get("params_before_overhaul"):
        age += f' <span class=err>older than overhaul {esc(r["last_overhaul"])}</span>'
    cells += [(now, str(_CODE[r["state_now"]])), (ev, str(r["alarms"] * 1000 + r["alerts"] * 10 + r["sensor_faults"])),
              (f"{obs} <span class=sub>/ {exp}</span>", obs_k), (drift, drift_k), (age, age_k),
              (esc("; ".join(r["reasons"]) or "-"), "")]
    return f'<tr data-sev="{sev}">' + "".join(f'<td data-k="{k}">{c}</td>' for c, k in cells) + "</tr>"


_JS = """
function sortBy(th){const t=th.closest('table'),i=[...th.parentNode.children].indexOf(th),b=t.tBodies[0];
const asc=th.dataset.asc!=='1';th.dataset.asc=asc?'1':'0';
const key=r=>{const k=r.children[i]?r.children[i].dataset.k:'';const f=parseFloat(k);return isNaN(f)?k:f;};
[...b.rows].sort((a,c)=>{const x=key(a),y=key(c);if(x===y)return 0;if(x===''||x===undefined)return 1;if(y===''||y===undefined)return -1;
return (x<y?-1:1)*(asc?1:-1);}).forEach(r=>b.appendChild(r));}
function filterSev(v){for(const r of document.querySelectorAll('#pumps tbody tr'))r.hidden=+r.dataset.sev<+v;}
"""
_MORE_CSS = ".err { color: #b8372a; } th { cursor: pointer; } select { font: inherit; }"


def _page(rows: Sequence[dict], meta: dict[str, Any], files: dict[str, bytes]) -> str:
    counts = {s: sum(r["severity"] == s for r in rows) for s in SEVERITIES}
    head = ["severity", "pump", "site", "gateway", "state now (last window)", "alarms / alerts / sensor faults",
            "alerts per 30 days observed / expected", "drift (x healthy)", "set age, days", "why"]
    options = "".join(f'<option value="{s}">{esc(SEVERITIES[s])} and worse</option>' for s in sorted(SEVERITIES))
    parts = [
        f"<!doctype html><html lang=en><head><meta charset=utf-8><title>{esc(meta['name'])}: fleet review</title>"
        f"<style>{CSS}{_MORE_CSS}</style><script>{_JS}</script></head><body>",
        f"<h1>{esc(meta['name'])}: fleet review</h1>",
        f"<p class=sub>{len(rows)} gateways; period replayed {esc(meta['period'])}; written {esc(meta['created'])}. "
        + ", ".join(f"{counts[s]} {SEVERITIES[s]}" for s in sorted(SEVERITIES, reverse=True) if counts[s]) + ".</p>",
        "<p class=caution>Advisory condition monitoring only: not a machinery-protection or safety system. "
        "No alert is no guarantee of health; defer to local codes and licensed practice.</p>",
        "<h2>Pumps</h2>",
        f'<p>Show <select onchange="filterSev(this.value)">{options}</select> '
        "<span class=sub>Click a column head to sort. A pump's name opens its replay report.</span></p>",
        '<table id=pumps><thead><tr>' + "".join(f'<th onclick="sortBy(this)">{esc(h)}</th>' for h in head)
        + "</tr></thead><tbody>" + "".join(_row(r) for r in rows) + "</tbody></table>",
        "<p class=sub>State now: the state, velocity r.m.s. (largest axis) and ISO zone of the last window replayed. "
        "Alerts per 30 days: transitions into alert or alarm per 30 days of running windows, every alert counted "
        "(a real fault's too), against the false alerts its training expected (\"at most\": an upper bound, where "
        "the training data were too few to estimate the rate itself). Drift: median score of the last "
        "week's scored windows over the median on its healthy recordings (1 = as learned). Set age: days from the "
        "manifest's params_since to the end of the period.</p>",
    ]
    if "overview.png" in files:
        parts += ["<h2>States over the period</h2>", '<img src="overview.png" alt="worst state per pump and day">',
                  "<h2>Drift from the learned normal</h2>", '<img src="drift.png" alt="weekly drift per pump">',
                  "<h2>Alert rate against expectation</h2>", '<img src="rates.png" alt="alert rates per pump">']
    events = [(r, e) for r in rows if not r.get("error") for e in r["events"]]
    if events:
        events.sort(key=lambda x: x[1]["t_s"])
        parts.append("<h2>Events in the period</h2><table><thead><tr><th>time (UTC)</th><th>pump</th><th>change</th>"
                     "<th>reason</th><th>feature</th><th>score</th></tr></thead><tbody>")
        for r, e in events:
            parts.append(f"<tr><td>{esc(_utc(e['t_s']))}</td><td>{esc(r.get('pump'))}</td>"
                         f"<td>{esc(e['from'])} &rarr; {state_tag(e['to'])}</td><td>{esc(e['reason'])}</td>"
                         f"<td>{esc(e['feature'] or '-')}</td><td class=num>{e['score']:.2f}</td></tr>")
        parts.append("</tbody></table>")
    parts.append("</body></html>")
    return "\n".join(parts)
