"""Test helper: one whole event capture through a SnapshotRing's own steps (keep the windows,
trigger, keep the windows after it, write to flash step by step), as the gateway does it."""
from array import array

EXTRA = {"reason": 3, "feature": 1, "score_q8": 512, "mode": 0}   # iso_d on flat feature 1


def save_capture(ring, kind, t, features, *windows, after=(), extra=EXTRA):
    """Keep each window (bytes or array('h') of n * axes counts, axis-major) with no gap,
    trigger on the last, keep the windows `after` it (as many as the ring records after a
    trigger), then write the capture whole; returns its id."""
    assert len(after) == ring.post, "the capture would not end"
    for w in windows:
        ring.keep(array("h", bytes(w)), 0)
    sid = ring.trigger(kind, t, features, extra)
    for w in after:
        ring.keep(array("h", bytes(w)), 0)
    while ring.forming():
        ring.work()
    return sid
