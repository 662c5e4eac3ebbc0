"""Times as a person reads them: moment(t_s, recording, offset_s) -> one string.

Recordings carry t0_s, seconds on the gateway's clock. A clock set to Unix time (t0_s past
2000-01-01) reads as a UTC date and time; any other clock (a recording without t0_s starts at
0 s) reads as seconds since its start. Either way the recording's file name and the offset into
it come with it, so the moment can be found in the file: `2026-03-13 09:20:03.2 UTC (p101_0412.wav
+ 12.8 s)`.
"""
from __future__ import annotations

import os
from datetime import datetime, timezone
from pathlib import Path

UNIX_2000_S = 946684800.0   # 2000-01-01 00:00:00 UTC as Unix seconds


def is_unix(t_s: float) -> bool:
    """Whether a time reads as Unix seconds (past 2000-01-01)."""
    return t_s > UNIX_2000_S


def utc_text(t_s: float, decimals: int = 1) -> str:
    """`2026-03-13 09:20:03.2 UTC`, or `t = 12.8 s` for a clock that is not Unix time."""
    if not is_unix(t_s):
        return f"t = {t_s:.{decimals}f} s"
    units = round(t_s * 10 ** decimals)            # whole tenths (decimals=1), so 59.96 s rounds up to the minute
    whole, frac = divmod(units, 10 ** decimals)
    text = f"{datetime.fromtimestamp(whole, timezone.utc):%Y-%m-%d %H:%M:%S}"
    if decimals:
        text += f".{frac:0{decimals}d}"
    return text + " UTC"


def moment(t_s: float, recording: str | os.PathLike | None = None, offset_s: float | None = None) -> str:
    """A time with the recording's name and the offset in it (see the module docstring)."""
    where = ""
    if recording is not None:
        where = f" ({Path(recording).name}" + (f" + {offset_s:.1f} s)" if offset_s is not None else ")")
    return utc_text(t_s) + where
