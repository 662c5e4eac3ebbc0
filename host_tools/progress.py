"""Progress of long work, one helper for every command: progress_bar(total, unit, label) (a
context manager) or start(...) (the same object, closed by the caller).

On a terminal (stderr is a tty) a tqdm bar; otherwise a quiet line at every tenth of the work
(`replay: 30% (1500/5000 windows)`), counted in work done, never on a timer, so logs stay short
and the same from run to run. `edgevib --quiet` (or COMMAND --quiet) turns both off:
host_tools.cli calls set_quiet. Lines go to stderr, so stdout keeps only the results.
"""
from __future__ import annotations

import sys
from typing import Any, TextIO

_QUIET = False
_STEPS = 10     # quiet lines per task when not on a terminal


def set_quiet(quiet: bool) -> None:
    """Turn progress output off (True) or on for the rest of the process."""
    global _QUIET
    _QUIET = bool(quiet)


def is_quiet() -> bool:
    return _QUIET


class _Lines:
    """Progress as a line at each tenth of the total."""

    def __init__(self, total: int, unit: str, label: str, out: TextIO):
        self.total, self.unit, self.label, self.out = max(0, int(total)), unit, label, out
        self.done = 0
        self.shown = 0          # tenths already reported

    def update(self, k: int = 1) -> None:
        self.done += k
        tenth = self.done * _STEPS // self.total if self.total else _STEPS
        if tenth > self.shown:
            self.shown = tenth
            pct = min(100, self.done * 100 // self.total) if self.total else 100
            print(f"{self.label}: {pct}% ({self.done}/{self.total} {self.unit})",
                  file=self.out, flush=True)

    def close(self) -> None:
        pass


class _Off:
    def update(self, k: int = 1) -> None:
        pass

    def close(self) -> None:
        pass


def start(total: int, unit: str, label: str, enabled: bool = True, out: TextIO | None = None) -> Any:
    """An object with update(k) and close(): a tqdm bar on a terminal, a line at each tenth of
    the total otherwise, nothing when enabled is False or output is quiet.
    total: units of work expected; unit: their name ("windows", "steps"); label: the work."""
    out = out if out is not None else sys.stderr
    if not enabled or _QUIET:
        return _Off()
    if out.isatty():
        from tqdm import tqdm
        return tqdm(total=total, unit=unit, desc=label, file=out, leave=False, dynamic_ncols=True)
    return _Lines(total, unit, label, out)


class progress_bar:
    """start() as a context manager: `with progress_bar(n, "windows", "replay") as bar: bar.update(k)`."""

    def __init__(self, total: int, unit: str, label: str, enabled: bool = True, out: TextIO | None = None):
        self._bar = start(total, unit, label, enabled, out)

    def __enter__(self):
        return self._bar

    def __exit__(self, *exc: Any) -> None:
        self._bar.close()


def note(text: str) -> None:
    """One line about a stage of the work (stderr), unless quiet."""
    if not _QUIET:
        print(text, file=sys.stderr, flush=True)
