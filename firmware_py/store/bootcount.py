"""Consecutive unhealthy boots, kept in a small text file (one decimal number), so a gateway that
keeps crashing falls back to safe mode instead of resetting forever. A boot counts until the
application has run healthy for a while and calls clear(); a deliberate reboot clears first.
A file that cannot be read counts as 0 (a cut while writing leaves it empty: the gateway then
tries normal running once more rather than locking itself out). Start-up only: allocates.

Entry points: BootCounter."""


class BootCounter:
    """path: the counter file; limit: crashes in a row after which the next boot is safe."""

    def __init__(self, path, limit):
        self.path = path
        self.limit = limit
        self.count = 0       # unhealthy boots before this one

    def _read(self):
        try:
            with open(self.path) as f:
                v = int(f.read().strip() or "0")
            return v if v >= 0 else 0
        except (OSError, ValueError):
            return 0

    def _write(self, v):
        try:
            with open(self.path, "w") as f:
                f.write("%d\n" % v)
        except OSError:
            pass                 # read-only or broken filesystem: run, but nothing is counted

    def start(self):
        """Count this boot. Returns True if it must run in safe mode (limit crashes in a row);
        a safe boot is not counted again, so the number stays at the limit until clear()."""
        self.count = self._read()
        if self.count >= self.limit:
            return True
        self._write(self.count + 1)
        return False

    def clear(self):
        """This boot was healthy (or ends by request): the next one starts from zero."""
        self._write(0)
