"""Progress output (host_tools.progress): counted in work done, by windows for a replay, a line
per tenth off a terminal, nothing with --quiet. Deterministic: no clock is read."""
import io
import re

import numpy as np

import firmware_py  # noqa: F401
from firmware_py.run import params as pm
from host_tools import progress
from host_tools.twin.replay import StreamReplay, replay
from tests.test_training import FS, PROFILE, pump_counts, recording


class _Pipe(io.StringIO):
    def isatty(self):
        return False


def test_lines_at_each_tenth_and_quiet_turns_them_off():
    out = _Pipe()
    with progress.progress_bar(20, "windows", "replay", out=out) as bar:
        for _ in range(20):
            bar.update(1)
    lines = out.getvalue().splitlines()
    assert lines[0] == "replay: 10% (2/20 windows)" and lines[-1] == "replay: 100% (20/20 windows)"
    assert len(lines) == 10
    progress.set_quiet(True)
    try:
        out = _Pipe()
        with progress.progress_bar(20, "windows", "replay", out=out) as bar:
            bar.update(20)
        assert out.getvalue() == ""
    finally:
        progress.set_quiet(False)


def test_replay_of_one_long_stream_counts_windows_not_streams(capsys):
    rng = np.random.default_rng(2)
    rec = recording(pump_counts(rng, 1480.0, 30.0), 0.0, 1480.0, "one")
    p = pm.factory(PROFILE)
    n_windows = StreamReplay([rec], p, PROFILE).n_windows
    assert n_windows == int(30.0 * FS) // p["n"]
    replay([[rec]], p, PROFILE, progress=True, chunk_windows=20)
    err = capsys.readouterr().err.splitlines()
    got = [re.fullmatch(r"replay: (\d+)% \((\d+)/(\d+) windows\)", ln) for ln in err]
    assert got and all(got)
    assert {int(m.group(3)) for m in got} == {n_windows}
    assert int(got[-1].group(2)) == n_windows and len(got) > 1     # moves within the one stream


def test_quiet_flag_of_the_command_line(tmp_path, capsys):
    from host_tools.cli import main
    assert main(["--quiet", "check", str(tmp_path / "missing.wav")]) == 2
    assert progress.is_quiet()
    main(["check", str(tmp_path / "missing.wav")])
    assert not progress.is_quiet()
