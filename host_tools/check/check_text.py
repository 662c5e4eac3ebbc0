"""The commissioning check as readable text: render_text(result) -> str (what `edgevib check` prints).

Entry points: render_text(CheckResult) -> str; CAUTION, the closing advice every rendering carries.
"""
from __future__ import annotations

from pathlib import Path

from host_tools.check.commission import CheckResult

CAUTION = (
    "This check is advisory condition monitoring, not a machinery protection or safety shutdown\n"
    "system; an all-clear is no guarantee. Fitting or adjusting a sensor on running machinery\n"
    "needs lock-out and the site's procedures: do it only with the machine made safe."
)


def render_text(r: CheckResult) -> str:
    """The readable report: header, one row per item, the lines per axis, verdict, caution."""
    out = [f"Commissioning check: {Path(r.recording).name}"]
    who = ", ".join(x for x in (r.plant, r.machine) if x)
    if who:
        out.append(f"  {who}")
    out.append(f"  {r.duration_s:.1f} s at {r.sample_rate_hz:g} Hz, axes {', '.join(r.axes)}; "
               f"{r.windows} windows of {r.n} samples (Hann)")
    speed = f"{r.rpm:g} r/min" if r.rpm is not None else "rpm unknown"
    vanes = f"{r.vane_count} vanes" if r.vane_count else "vane count unknown"
    board = f"board {r.settings.board_name}" if r.settings.board_name else "no board profile"
    z = r.settings.zones_mm_s
    out.append(f"  {speed}, {vanes}; {board}; zones {z[0]:g}/{z[1]:g}/{z[2]:g} mm/s: {r.settings.zones_source}")
    out.append("")
    out.append(f"  {'verdict':<8} {'item':<12} {'axis':<4} {'value':<40} explanation")
    for i in r.items:
        out.append(f"  {i.verdict:<8} {i.name:<12} {i.axis or '-':<4} {i.value:<40} {i.explanation}")
    out.append("")
    out.append("Strongest spectral lines (acceleration and velocity r.m.s.; order = multiple of shaft speed)")
    out.append(f"  {'axis':<4} {'Hz':>8} {'order':>6} {'m/s^2':>8} {'mm/s':>7}  name")
    for sp in r.spectra:
        if not sp.lines:
            out.append(f"  {sp.axis:<4} {'none':>8}")
        for ln in sp.lines:
            order = f"{ln.order:.2f}" if ln.order is not None else "-"
            out.append(f"  {sp.axis:<4} {ln.freq_hz:8.1f} {order:>6} {ln.level_m_s2:8.3g} {ln.velocity_mm_s:7.3g}  {ln.name}")
    out.append("")
    out.append(f"Overall: {r.overall.upper()}: {r.summary}")
    out.append("")
    out.append(CAUTION)
    return "\n".join(out) + "\n"
