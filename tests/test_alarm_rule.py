"""The persistence rule of firmware_py/detect/alarm.py on hand-made flag sequences: k of the last
L evaluated windows raise, the windows not yet seen after a reset count as not over, clearing
waits for a full span and the dwell, and after a clear a raise waits for the dwell too (the rule
as docs/detector.md, Persistence, states it; the sequences are counted by hand)."""
import firmware_py  # noqa: F401
from firmware_py.detect import alarm as al

L, K, DWELL = 10, 5, 4


def feed(a, flags):
    """Step a with one window per flag (1 over the alert and clear thresholds, 0 under both)."""
    return [a.update(f, 0, f, 0) for f in flags]


def test_k_windows_raise_without_waiting_for_the_span():
    a = al.Alarm(L, K, 1000, DWELL)
    assert feed(a, [1] * K) == [al.NORMAL] * (K - 1) + [al.ALERT]
    a.reset()                                   # a stop forgets the evidence; the alert with it
    assert a.level == al.NORMAL
    assert feed(a, [0, 1, 1, 1, 1]) == [al.NORMAL] * 5
    assert feed(a, [1]) == [al.ALERT]           # the 5th over window since the reset


def test_no_raise_right_after_a_clear_until_the_dwell():
    # alert at window 10 (5 of the span over); then a pattern (found by enumerating short flag
    # sequences with the settling off) whose 10th window clears with 4 over and whose 11th brings
    # the span back to 5: clear and raise would take turns. With the dwell the level stays
    # normal for DWELL windows after the clear, then raises if the span still holds k over.
    a = al.Alarm(L, K, 1000, DWELL)
    assert feed(a, [0] * 5 + [1] * 5)[-1] == al.ALERT
    states = feed(a, [0, 0, 0, 0, 0, 1, 1, 1, 1, 0])
    assert states[-1] == al.NORMAL and a.reason == al.R_CLEAR
    states = feed(a, [1] * 6)
    assert a.ev.n_a >= K
    assert states[:DWELL - 1] == [al.NORMAL] * (DWELL - 1) and states[DWELL - 1:] == [al.ALERT] * (7 - DWELL)
    # the same with no dwell: the raise comes on the very next window (the test can fail)
    b = al.Alarm(L, K, 1000, 0)
    feed(b, [0] * 5 + [1] * 5 + [0, 0, 0, 0, 0, 1, 1, 1, 1, 0])
    assert b.level == al.NORMAL and feed(b, [1]) == [al.ALERT]
