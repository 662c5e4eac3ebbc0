"""The look every report shares: palette, plot style and page parts.

Used by the replay report (host_tools.report.replay_report), the comparison page
(host_tools.report.compare_report) and the fleet review page (host_tools.fleet.page), so that
they read as one family.

- Palette: INK, MUTED, GRID, PAPER and STATE_COLOURS (our own, muted), DRAW_ORDER (the detector
  states from least to most severe: later is drawn on top).
- Plots: pyplot() is matplotlib on the Agg backend in the palette's colours; style_axes(ax) sets
  the grid and the log-axis ticks; png(fig) is the figure as PNG bytes.
- Pages: CSS, esc(v) (HTML escaping), state_code(s), state_tag(name) (a state's name on its
  colour), duration_text(s) (seconds as min, h or days) and html_table(head, rows, num).
"""
from __future__ import annotations

import html
import io
from typing import Any, Sequence

import firmware_py  # noqa: F401  (installs the micropython stand-in the device modules import)
from firmware_py.detect.alarm import ALARM, ALERT, IDLE, LEARNING, NORMAL, SENSOR_FAULT, STATE_NAMES, UNSCORED

_DAY_S = 86400.0

# Our own palette, muted; the states also differ in order (worst drawn on top) and in the tables by name.
INK, MUTED, GRID, PAPER = "#1d2b36", "#75838f", "#e4e8ec", "#ffffff"
STATE_COLOURS = {
    NORMAL: "#8fbf9f",        # sage
    ALERT: "#e3a32b",         # amber
    ALARM: "#b8372a",         # brick
    IDLE: "#cfd5dc",          # pale slate
    SENSOR_FAULT: "#7356a3",  # violet
    LEARNING: "#4f88b4",      # steel blue
    UNSCORED: "#a7b89a",      # lichen: running, health not judged (an operating point never learned)
}
DRAW_ORDER = (IDLE, NORMAL, UNSCORED, LEARNING, ALERT, SENSOR_FAULT, ALARM)   # later is drawn on top


# --- plots ----------------------------------------------------------------------------------------

def pyplot():
    """matplotlib.pyplot on the Agg backend (no display), text and axes in the palette."""
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib import pyplot as plt
    plt.rcParams.update({"font.size": 9, "axes.edgecolor": MUTED, "axes.labelcolor": INK,
                         "xtick.color": INK, "ytick.color": INK, "axes.titlecolor": INK})
    return plt


def style_axes(ax) -> None:
    """Grid behind the data, no top and right spines; a log y axis gets ticks at 1, 2 and 5."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter
    ax.grid(True, which="major", color=GRID, lw=0.7)
    if ax.get_yscale() == "log":
        # ticks at 1, 2 and 5 per decade, so a span under one decade still gets labels
        ax.yaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
        ax.yaxis.set_minor_formatter(NullFormatter())
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def png(fig) -> bytes:
    """The figure as PNG bytes (110 dpi, on PAPER)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, facecolor=PAPER)
    return buf.getvalue()


# --- pages ----------------------------------------------------------------------------------------

CSS = """
body { font: 14px/1.45 system-ui, sans-serif; color: #1d2b36; margin: 2em auto; max-width: 1240px; padding: 0 1em; }
h1 { font-size: 1.45em; margin-bottom: .2em; } h2 { font-size: 1.1em; margin-top: 2em; border-bottom: 2px solid #e4e8ec; }
.sub { color: #75838f; } .caution { border-left: 4px solid #e3a32b; background: #fcf6ea; padding: .6em 1em; }
table { border-collapse: collapse; margin: .6em 0; font-size: .92em; }
th, td { padding: .25em .7em; text-align: left; border-bottom: 1px solid #e4e8ec; vertical-align: top; }
th { color: #75838f; font-weight: 600; } td.num { text-align: right; font-variant-numeric: tabular-nums; }
img { max-width: 100%; display: block; margin: .6em 0; }
.st { display: inline-block; padding: 0 .45em; border-radius: 3px; }
"""


def esc(v: Any) -> str:
    """str(v) escaped for HTML text and attribute values."""
    return html.escape(str(v))


def state_code(s: Any) -> int:
    """A state given as its name or its integer, as an int."""
    return STATE_NAMES.index(s) if isinstance(s, str) else int(s)


def state_tag(name: Any) -> str:
    """A detector state (name or int) as HTML: its name on its colour."""
    code = state_code(name)
    dark = code in (ALARM, SENSOR_FAULT, LEARNING)
    return (f'<span class="st" style="background:{STATE_COLOURS.get(code, GRID)};'
            f'color:{"#fff" if dark else INK}">{esc(STATE_NAMES[code])}</span>')


def duration_text(s: float) -> str:
    """Seconds as minutes under an hour, hours under two days, else days."""
    if s < 3600:
        return f"{s / 60:.1f} min"
    if s < 2 * _DAY_S:
        return f"{s / 3600:.1f} h"
    return f"{s / _DAY_S:.2f} days"


def html_table(head: Sequence[str], rows: Sequence[Sequence[str]], num: Sequence[int] = ()) -> str:
    """A table: head escaped here, cells already HTML; columns `num` right-aligned (numbers)."""
    h = "".join(f"<th>{esc(c)}</th>" for c in head)
    body = "".join("<tr>" + "".join(f'<td{" class=num" if i in num else ""}>{c}</td>' for i, c in enumerate(r))
                   + "</tr>" for r in rows)
    return f"<table><tr>{h}</tr>{body}</table>"
