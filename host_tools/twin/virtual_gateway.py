"""A virtual gateway on the desk: the real firmware_py Gateway and Service on a pseudo-terminal,
fed from a recording as from the sensor's FIFO, so every host command runs against it exactly
as against a board.

- Samples: the recording's int16 counts (converted to the board's counts scale, saturated at
  the converter's full scale as a real sensor would be) go to Gateway.feed in blocks of the
  profile's fifo_watermark frames, paced at real time x speed (speed 0: as fast as the host
  runs). After each block the gateway polls, as the board's main loop does, so the virtual
  sensor never overruns. At the end of the recording the gateway idles (keeps answering on the
  link, processes no more windows), or with loop=True starts the recording again (the seam is a
  jump in the signal, not a gap in the sample stream).
- Clock: the virtual gateway's time is the recording's: ticks_ms counts the samples fed since
  boot (frames * 1000 / fs), and the wall clock starts at the recording's t0_s (0 if it has
  none) at the position where the gateway booted, like a board with a battery-backed clock.
  The `clock` command moves it as on a board.
- State: the parameter store and the event captures are files in state_dir, so stopping the
  emulator and starting another on the same folder is a power cut. `reboot` rebuilds the store,
  event captures, gateway and command handler from those files, as a boot would; samples keep coming
  from where the recording had got to.
- Link: os.openpty(); the slave end is put in raw mode (termios) and its name is .port, which a
  host opens with pyserial. Replies are always queued; the pushes (stream, raw) of a window are
  dropped, all of them, when more than PUSH_BACKLOG bytes already wait for a host that is not
  reading fast enough (counted in push_dropped, frames), as a slow link would lose them; the raw
  stream's window indices show the loss.

Run it in a thread for tests (start() / stop(); wait_until(cond) blocks until cond() holds, with
no timeout), or in the foreground with run().

Entry points: load_profile(), VirtualGateway.
"""
from __future__ import annotations

import array
import errno
import os
import select
import sys
import termios
import threading
import time
import tty
from pathlib import Path

import numpy as np

import firmware_py  # noqa: F401  (installs the micropython stand-in the device modules import)
from firmware_py.run import board, params as params_mod
from firmware_py.codec import mpack
from firmware_py.run.gateway import Gateway
from firmware_py.store.paramstore import ParamStore
from firmware_py.link.service import Service
from firmware_py.store.latch import LatchFile
from host_tools.errors import EdgevibError
from host_tools.data.recording import read_recording
from host_tools.data.units import STANDARD_GRAVITY_M_S2

DESK_BOARD = Path(__file__).resolve().parents[2] / "boards" / "desk.json"
PARAM_CAP = 8192              # largest parameter image the store accepts, bytes
PUSH_BACKLOG = 256 * 1024     # bytes of unread output beyond which pushes are dropped
_READ = 4096
_CATCH_UP = 32                # FIFO blocks fed at most between two looks at the link


def load_profile(path: str | os.PathLike | None) -> dict:
    """A checked board profile (the desk board by default); EdgevibError if refused."""
    try:
        return board.load(str(path or DESK_BOARD))
    except board.BoardError as e:
        raise EdgevibError(f"board profile {e}") from None


def _gateway_id(state_dir: str) -> str:
    """The virtual gateway's id, as a board's unique id: drawn once, kept in state_dir/gateway.id."""
    path = os.path.join(state_dir, "gateway.id")
    try:
        with open(path) as f:
            gid = f.read().strip()
        if gid:
            return gid
    except OSError:
        pass
    gid = os.urandom(8).hex()
    with open(path, "w") as f:
        f.write(gid + "\n")
    return gid


class VirtualGateway:
    """recording: path of a recording (read with its sidecar); profile: board profile dict;
    state_dir: folder for the parameter files and event captures; speed: real time multiple (0 = as
    fast as possible); loop: restart the recording at its end instead of idling; key: site key
    bytes the gateway holds, or None."""

    def __init__(self, recording: str | os.PathLike, profile: dict, state_dir: str | os.PathLike,
                 speed: float = 1.0, loop: bool = False, key: bytes | None = None):
        if not speed >= 0:
            raise EdgevibError(f"--speed must be 0 (as fast as possible) or more, not {speed}")
        self.profile = profile
        self.fs = profile["sample_rate_hz"]
        self.block = profile["fifo_watermark"]
        m_s2_per_count = STANDARD_GRAVITY_M_S2 / profile["sensor"]["counts_per_g"]
        rec = read_recording(recording, expected_rate_hz=self.fs, m_s2_per_count=m_s2_per_count)
        if rec.counts.shape[1] != profile["axes"]:
            raise EdgevibError(f"{rec.path}: {rec.counts.shape[1]} axes, board {profile['name']} "
                               f"has {profile['axes']}")
        s = profile["sensor"]
        self.counts = np.clip(rec.counts, s["adc_min"], s["adc_max"])
        self.saturated = int(np.count_nonzero(self.counts != rec.counts))   # samples a real sensor would clip
        self.recording = rec
        self.t0_s = rec.t0_s or 0.0
        self.state_dir = str(state_dir)
        try:
            os.makedirs(self.state_dir, exist_ok=True)
        except OSError as e:
            raise EdgevibError(f"{state_dir}: cannot make the state folder ({e.strerror})") from None
        self.gateway_id = _gateway_id(self.state_dir)
        self.speed = float(speed)
        self.loop = loop
        self.key = key
        self._factory = mpack.packb(params_mod.factory(profile), PARAM_CAP)
        self.pos = 0                  # next recording frame to feed
        self.fed = 0                  # frames fed since the emulator started (all passes)
        self.boot_fed = 0             # self.fed when the current gateway booted
        self.boot_pos = 0             # recording frame at which the current gateway booted
        self.boots = 0
        self.push_dropped = 0
        self.faults: list[str] = []   # exceptions the gateway raised, as the board would report
        self.ended = threading.Event()     # the recording has been fed to its end (once)
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._running = False         # the thread of start() is running
        self.changed = threading.Condition()   # notified after every turn of run()'s loop
        self.clock = time.monotonic   # the pacing clock (a test may give its own)
        self._due = 0.0               # clock time the next FIFO block is due
        self._feeding = True          # False once the recording has ended (no loop)
        self._tx = bytearray()
        self._drop_pushes = False
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave, termios.TCSANOW)   # no echo, no line editing: bytes pass unchanged
        os.set_blocking(self._master, False)
        self.port = os.ttyname(self._slave)
        self._boot()

    # ---- the device ----
    def _ticks_ms(self) -> int:
        return (self.fed - self.boot_fed) * 1000 // self.fs

    def _boot(self) -> None:
        """Start the firmware on the files in state_dir, as a board does at power-up."""
        p = self.profile
        store = ParamStore(self.state_dir, p["name"], self.fs, p["window_n"], p["axes"],
                           self._factory, key=self.key, cap=PARAM_CAP, gateway_id=self.gateway_id)
        snaps = board.snapshot_ring(p, self.state_dir)     # as the board sizes them
        self.boot_fed = self.fed
        self.boot_pos = self.pos
        gw = Gateway(p, store, snaps, self._ticks_ms, LatchFile(os.path.join(self.state_dir, "alarm.latch")))
        gw.clock_base = int(self.t0_s + self.pos / self.fs)
        gw.service = Service(gw, self._write)
        self.gateway = gw
        self.boots += 1

    def _write(self, frame: bytes) -> None:
        if self._drop_pushes:
            self.push_dropped += 1
            return
        self._tx += frame

    def _feed_block(self) -> bool:
        """Feed one FIFO block and run the windows it completes; False at the end (no loop)."""
        if self.pos >= len(self.counts):
            self.ended.set()
            if not self.loop:
                return False
            self.pos = 0
        k = min(self.block, len(self.counts) - self.pos)
        src = array.array("h", self.counts[self.pos:self.pos + k].tobytes())
        self.pos += k
        self.fed += k
        gw = self.gateway
        self._drop_pushes = len(self._tx) > PUSH_BACKLOG    # for every push of these windows
        try:
            gw.feed(src, k)
            gw.poll()
        except Exception as e:        # what resets a board: reported, and the gateway restarts
            self._fault(e)
        finally:
            self._drop_pushes = False
        return True

    def _fault(self, e: Exception) -> None:
        """The window path raised: report it, move a committed set aside (the factory set always
        runs), and boot again on the files, as the board's reset and fall-back would."""
        what = f"{type(e).__name__}: {e}"
        self.faults.append(what)
        print(f"virtual gateway: the gateway raised {what}; restarting", file=sys.stderr)
        store = self.gateway.params
        if store.source != "factory":
            store.quarantine()
        self._boot()

    # ---- the link ----
    def _link(self, timeout_s: float) -> None:
        """Wait up to timeout_s for link bytes; hand them to the command handler; send output."""
        wlist = [self._master] if self._tx else []
        try:
            readable, _, _ = select.select([self._master], wlist, [], timeout_s)
        except (OSError, ValueError):   # closed under us by stop()
            return
        if readable:
            try:
                data = os.read(self._master, _READ)
            except (BlockingIOError, InterruptedError):
                data = b""
            except OSError as e:
                if e.errno != errno.EIO:   # EIO: no host has the port open at the moment
                    raise
                data = b""
            if data:
                self.gateway.service.receive(data)
                if not hasattr(self.gateway, "det"):
                    # a committed set that could not be built (App._serve does the same)
                    self._fault(RuntimeError("the committed set could not be built"))
                if self.gateway.reboot_wanted:
                    self._flush()
                    self._boot()
        if self._tx:
            self._flush()

    def _flush(self) -> None:
        """Write what the pty takes now; the rest waits for the next turn."""
        try:
            n = os.write(self._master, self._tx)
        except (BlockingIOError, InterruptedError):
            return
        except OSError as e:
            if e.errno == errno.EIO:
                return
            raise
        del self._tx[:n]

    # ---- running ----
    def run(self) -> None:
        """Feed the recording and answer the link until stop()."""
        self._due = self.clock()
        try:
            while not self._stop.is_set():
                self._link(self._pace(self.clock()))
                with self.changed:
                    self.changed.notify_all()
        finally:
            with self.changed:
                self._running = False
                self.changed.notify_all()

    def _pace(self, now: float) -> float:
        """Feed the FIFO blocks due by clock time now (real time x speed from the first call to
        run(); at most _CATCH_UP blocks, so the link is answered when behind), and return the
        seconds to wait for link bytes before the next is due (at most 0.05)."""
        period = self.block / (self.fs * self.speed) if self.speed > 0 else 0.0
        for _ in range(_CATCH_UP):      # behind time: catch up, but keep answering
            if not (self._feeding and now >= self._due):
                break
            self._feeding = self._feed_block()
            self._due += period
            if period == 0.0:
                break
        return min(max(0.0, self._due - now), 0.05) if self._feeding else 0.05

    def wait_until(self, cond) -> bool:
        """Block until cond() holds or the gateway's thread has ended (it re-checks after every
        turn of its loop), and return cond(): no clock involved, so a test cannot fail for being
        slow; only a gateway that runs on without cond() ever holding would wait for good."""
        with self.changed:
            self.changed.wait_for(lambda: cond() or not self._running)
        return bool(cond())

    def start(self) -> "VirtualGateway":
        """Run in a background thread (for tests and in-process use)."""
        self._running = True
        self._thread = threading.Thread(target=self.run, name="virtual-gateway", daemon=True)
        self._thread.start()
        return self

    def stop(self) -> None:
        """Stop running and close the pseudo-terminal (a power cut, as far as the host can tell)."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
        for fd in (self._master, self._slave):
            try:
                os.close(fd)
            except OSError:
                pass

    def frame_of_window(self, w: int) -> int:
        """Recording frame where window w of the running gateway starts (no loop, no commit
        since boot, no frames lost): for tests that compare what the link delivered."""
        return self.boot_pos + w * self.profile["window_n"]
