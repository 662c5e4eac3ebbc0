"""A latched, unacknowledged alarm kept on the filesystem, so that no flash, rollback, reboot or
power cut clears it: only an acknowledgement does (docs/engineer.md, docs/protocol.md).

Entry point: LatchFile(path): load() -> reason (firmware_py.detect.alarm R_*; 0: none latched),
save(reason). The file holds one line "latched <reason> end". save() writes path.tmp, removes
path, renames path.tmp to path; load() reads path, else path.tmp, so a cut at any step leaves
the old or the new value readable (a half-written line lacks " end" and is not taken).
Start-up and after a window's state change only: allocates.
"""
import os


class LatchFile:
    def __init__(self, path):
        self.path = path
        self.tmp = path + ".tmp"

    def load(self):
        """The latched alarm's reason, or 0 if none is latched or no file is readable."""
        for p in (self.path, self.tmp):
            r = _read(p)
            if r >= 0:
                return r
        return 0

    def save(self, reason):
        """Record reason (0: nothing latched) so that a cut at any point keeps old or new."""
        with open(self.tmp, "w") as f:
            f.write("latched %d end\n" % reason)
        try:
            os.remove(self.path)
        except OSError:
            pass
        os.rename(self.tmp, self.path)


def _read(path):
    try:
        with open(path) as f:
            words = f.read().split()
    except OSError:
        return -1
    if len(words) != 3 or words[0] != "latched" or words[2] != "end":
        return -1
    try:
        r = int(words[1])
    except ValueError:
        return -1
    return r if r >= 0 else -1
