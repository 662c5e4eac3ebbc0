"""The sample ring: blocks in, whole windows out, overruns counted and never written over."""
import array

import numpy as np

from firmware_py.dsp.ring import SampleRing
from tests.engines import ENGINES


def _push(ring, frames_xyz):
    src = array.array("h", np.asarray(frames_xyz, dtype=np.int16).tobytes())
    return ring.push(src, len(frames_xyz))


def test_blocks_of_any_size_come_out_as_exact_windows():
    rng = np.random.default_rng(0)
    ring = SampleRing(3, 64, 3)
    data = rng.integers(-32768, 32768, (64 * 20, 3), dtype=np.int16)
    got, i = [], 0
    while i < len(data):
        k = int(rng.integers(1, 40))           # FIFO watermark reads of varying length
        assert _push(ring, data[i:i + k]) == 0
        i += k
        while ring.ready():
            got.append(np.stack([np.array(ring.window(a)) for a in range(3)], axis=1))
            ring.release()
    assert np.array_equal(np.concatenate(got), data[: len(got) * 64])
    assert ring.dropped == 0


def test_full_ring_counts_dropped_frames_and_keeps_unprocessed_windows():
    ring = SampleRing(1, 32, 2)
    first = np.arange(64)                      # fills both slots
    assert _push(ring, first[:, None]) == 0
    assert _push(ring, np.full((10, 1), 7)) == 10   # nothing processed yet: all 10 dropped
    assert ring.dropped == 10
    assert np.array_equal(np.array(ring.window(0)), first[:32])   # not overwritten
    ring.release()
    assert _push(ring, np.full((40, 1), 9)) == 8    # room for one window only
    assert ring.dropped == 18
    assert np.array_equal(np.array(ring.window(0)), first[32:])
    ring.release()
    assert np.array_equal(np.array(ring.window(0)), np.full(32, 9))


@ENGINES
def test_push_is_allocation_free_on_micropython(run):
    res = run("""
import array
from firmware_py.dsp.ring import SampleRing
ring = SampleRing(3, 64, 2)
src = array.array('h', range(-48, 48))
def fill():
    return ring.push(src, 32)
emit([locked(fill), locked(fill), locked(fill), locked(fill), locked(fill), ring.dropped])
emit([list(ring.window(a)) for a in range(3)])
""")
    *pushes, dropped = res.out[0]
    assert all(ok for ok, _ in pushes)
    assert [lost for _, lost in pushes] == [0, 0, 0, 0, 32]
    assert dropped == 32
    # the oldest window holds the first 64 frames, de-interleaved (src[3 * f + a] = 3f + a - 48)
    assert res.out[1] == [[3 * (f % 32) + a - 48 for f in range(64)] for a in range(3)]
