"""Names of a pump's spectral lines and the window's noise bandwidth, shared by the check and the report.

Entry points: line_names(rpm, vanes) -> {order: name}; HANN_ENBW_BINS.
"""
from __future__ import annotations

# Hann window (periodic, as tables.hann): equivalent noise bandwidth 1.5 bins (common practice).
HANN_ENBW_BINS = 1.5


def line_names(rpm: float | None, vanes: int | None) -> dict[int, str]:
    """Orders of shaft speed the check can name: 1x-3x, and with a vane count the vane pass,
    its +-1x sidebands and its second harmonic with its sidebands."""
    if not rpm:
        return {}
    names: dict[int, list[str]] = {h: [f"{h}x"] for h in (1, 2, 3)}
    if vanes:
        for order, name in ((vanes, "vane pass"), (vanes - 1, "vane pass - 1x"), (vanes + 1, "vane pass + 1x"),
                            (2 * vanes, "2x vane pass"), (2 * vanes - 1, "2x vane pass - 1x"),
                            (2 * vanes + 1, "2x vane pass + 1x")):
            if order >= 1:
                labels = names.setdefault(order, [])
                # the vane pass itself outranks a plain harmonic of the same order
                labels.insert(0 if order in (vanes, 2 * vanes) else len(labels), name)
    return {o: " / ".join(v) for o, v in names.items()}
