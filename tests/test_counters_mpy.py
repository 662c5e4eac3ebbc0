"""Every device counter saturates below 2**30, proven at the limit on the WASI MicroPython, whose
small ints end at 2**30 - 1 as on a 32-bit board (MicroPython py/smallint.h; FACTS.md): one
step past the limit would make a heap int, which raises MemoryError under heap_lock."""
import json

from host_tools.twin.mpy_guest import run_guest
from tests.test_app import DESK, _GUEST_GATEWAY

LIMIT = 2 ** 30 - 1

_AT_THE_LIMIT = """
from firmware_py.dsp.counters import COUNT_MAX
from firmware_py.drivers import GapCounter
from firmware_py.link.service import Service
ring = gw.core.ring
src = array.array('h', bytes(2 * 3 * n))
out = []
# the ring: full, at the limit, and more frames arrive
ring.dropped = COUNT_MAX - 5
gw.windows = gw.wrap - 1                       # the window index at its wrap
gw.skipped = COUNT_MAX
gw.lost_elsewhere = COUNT_MAX - 2
gw.dropped_seen = COUNT_MAX - 1
g = gw.gaps
for i in range(len(g)):
    g[i] = COUNT_MAX - 1
def fill():
    for k in range(ring.slots + 1):
        gw.feed(src, n)
    return ring.dropped
out.append(locked(fill))
out.append(locked(lambda: gw.lost_upstream(1000) or gw.lost_elsewhere))
def window():
    return gw.window()
out.append(locked(window))
out.append([gw.windows, gw.dropped_seen, ring.dropped, gw.lost_elsewhere, max(g)])
st = gw.status()
out.append([st['dropped'], st['skipped']])
# the driver's overrun bookkeeping
t = [0]
def ticks():
    return t[0]
gc = GapCounter(ticks, 5000)
gc.lost = COUNT_MAX - 3
gc.overruns = COUNT_MAX
gc.unreported = COUNT_MAX - 1
def overrun():
    t[0] += 1000000
    gc.account(0, True)
out.append([locked(overrun)[0], [gc.lost, gc.overruns, gc.unreported]])
# the link's frame counters
svc = Service(gw, lambda b: None)
svc.frames_in = COUNT_MAX
svc.errors = COUNT_MAX
svc.receive(bytes([5, 1, 2, 0]))               # a damaged frame: an error reply
out.append([svc.frames_in, svc.errors])
emit(out)
"""


def test_every_counter_saturates_at_its_limit_on_micropython():
    body = (_GUEST_GATEWAY % {"profile": json.dumps(DESK)}) + _AT_THE_LIMIT
    fill, upstream, window, after, status, gaps, link = run_guest(body).out[0]
    assert fill == [True, LIMIT]                          # no allocation, held at the limit
    assert upstream == [True, LIMIT]
    assert window == [True, True]                         # a window at the wrap, heap locked
    windows, told, dropped, elsewhere, gap = after
    assert windows == 0 and told == LIMIT and dropped == LIMIT and elsewhere == LIMIT
    assert gap == LIMIT
    assert status == [LIMIT, LIMIT]
    assert gaps == [True, [LIMIT, LIMIT, LIMIT]]
    assert link == [LIMIT, LIMIT]
