"""A machine fault run without a gap, every window as a gateway sees it
(host_tools.ops.continuous.gapless_fault): the plumbing from the generator through the feature
twin and the device detector to a dated first raise, on the board's analyse_every.

The set is the factory one (no model: the ISO guard only) with its zone boundaries lowered under
the pump's own velocity, so that the guard must raise as soon as its rule allows; what is checked
is where and when the raise lands, not the detector's judgement (the scorecard measures that)."""
import numpy as np

from firmware_py.run import params as pm
from host_tools.data import scenarios as sc
from host_tools.data.files import load_board
from host_tools.ops.continuous import gapless_fault

SEED, SCALE, NAME = 2027, "demo", "RW-1-imbalance"


def test_the_first_raise_lands_on_an_analysed_window_at_the_same_running_time_on_any_board():
    prof = load_board(None)
    p = dict(pm.factory(prof), det_iso_bounds=[1, 2, 3])      # counts/s Q16: every running window in zone D
    h = next(x for x in sc.evaluation_suite(SEED, SCALE) if x.name == NAME)
    hours = 0.05
    # a moment after the onset with the pump running steadily for the whole run
    grid = h.faults[0].onset_t_s + 600.0 * np.arange(1, 200)
    vis = next(t for t in grid if all(h.running_steady(t + d) for d in np.linspace(-200.0, 200.0, 9)))
    n, fs = p["n"], p["fs_hz"]
    got = {}
    for every in (1, 2):
        r = gapless_fault(SEED, SCALE, NAME, float(vis), p, dict(prof, analyse_every=every), hours)
        e = r["raised_as"]
        assert r["start_t_s"] == vis - hours * 3600.0 and e is not None
        assert (e["from"], e["to"], e["reason"]) == ("normal", "alarm", "iso_d")   # zone D: straight to alarm
        # the raise is dated at the end of an analysed window: windows 0, every, 2 every, ... of
        # the stream, each n samples long (to the rounding of two Unix times, one float64 ulp each)
        k = (e["t_s"] - r["start_t_s"]) * fs / n
        assert abs(k - round(k)) <= 2 * np.spacing(vis) * fs / n and (round(k) - 1) % every == 0
        assert r["delay_s"] == e["t_s"] - vis and r["at_start"]
        got[every] = e["t_s"]
    # the guard's rule is in seconds of running: on a board analysing 1 window in 2 it raises at
    # the same time, to within one analysed window's span (2 n / fs)
    assert abs(got[2] - got[1]) <= 2 * n / fs
