"""Analysis settings: the board profile the desk works with, built from a recording or a set.

Entry points: desk_profile(recs) for training on recordings without a hand-made profile;
profile_for_set(params, board, recs) for replaying a parameter set; load_board(path).

A desk profile (named RECORDING_BOARD, "recording", so that no gateway accepts a set made for it
and the stock boards/desk.json keeps its meaning) is what a virtual gateway would need to analyse these recordings:
- axes: the file's channels; sample rate: the file's (a whole number of Hz, at least 2560 Hz);
- window length n: the shortest power of two (512 at least, 4096 at most) whose bin width
  fs / n puts 1x at the lowest shaft speed named in the sidecars at bin RESOLVE_BINS or above,
  clear of the Hann window's DC leakage (bins 0 and 1, whose main lobe is 2 bins wide each side:
  Harris 1978); without a speed, the desk board's 0.16 s window (n = fs * 0.16, rounded up,
  but at most 4096: at 26.667 kHz that is 0.154 s, and no speed asks for more);
- counts scale and full scale: from the sample format, or from the optional sidecar keys
  full_scale (the sensor's full scale in the file's units, e.g. 4095 for 13-bit data stored as
  int16, or 16.0 for float data in g) and m_s2_per_count. int16 data keeps its own resolution
  (counts = samples); int32 and float data are mapped so their full scale fills int16. The
  counts scale is standard gravity / counts_per_g with counts_per_g a whole number (the
  parameter set stores it so), never finer than the file's own resolution.
A set trained on a desk profile is replayed with the sensor of the recordings given (its counts
scale must still match the set's, which host_tools.twin.replay.check_recordings enforces); a set
for a named board (boards/<name>.json) is replayed with that board, and a set that does not fit
the board is refused with the reason.
"""
from __future__ import annotations

import copy
import json
import math
from pathlib import Path
from typing import Any, Sequence

import firmware_py  # noqa: F401  (installs the micropython stand-in)
from firmware_py.run import board
from host_tools.data import units
from host_tools.data.files import DEFAULT_BOARD, load_board
from host_tools.errors import EdgevibError

BOARDS = DEFAULT_BOARD.parent
RECORDING_BOARD = "recording"
MIN_RATE_HZ = 2560          # 2.56 x 1000 Hz: the 10-1000 Hz band with the usual anti-alias margin (common practice)
RESOLVE_BINS = 3            # 1x at this bin or above (see the module docstring)
DESK_WINDOW_S = 0.16        # desk board: 512 samples at 3200 Hz
MIN_N, MAX_N = 512, 4096    # MAX_N: the feature core's largest window (firmware_py.dsp.features)
_INT16_FULL = 32767
_FORMAT_FULL = {"int16": 32767, "int32": 2**31 - 1, "int64": 2**31 - 1}


def check_rate(path: Any, rate_hz: float) -> int:
    """The sample rate as the whole number of Hz a profile holds; refuses a rate below MIN_RATE_HZ."""
    if rate_hz < MIN_RATE_HZ:
        raise EdgevibError(f"{path}: sample rate {rate_hz:g} Hz is too low for the 10-1000 Hz band "
                           f"(needs at least {MIN_RATE_HZ} Hz, 2.56 x the band's top)")
    if not math.isclose(rate_hz, round(rate_hz), rel_tol=1e-6):
        raise EdgevibError(f"{path}: sample rate {rate_hz:g} Hz is not a whole number of Hz, which a gateway needs")
    return int(round(rate_hz))


def window_for(fs_hz: int, lowest_rpm: float | None) -> int:
    """Window length (samples) for rate fs_hz that resolves 1x at lowest_rpm (see the docstring)."""
    if lowest_rpm:
        need = RESOLVE_BINS * fs_hz * 60.0 / lowest_rpm
    else:
        need = min(DESK_WINDOW_S * fs_hz, MAX_N)    # a default, not a requirement: never refused
    n = MIN_N
    while n < need - 1e-9:
        n *= 2
    if n > MAX_N:
        raise EdgevibError(f"1x at {lowest_rpm:g} r/min at {fs_hz} Hz needs windows longer than {MAX_N} samples, "
                           "the longest a gateway computes; record at a lower rate")
    return n


def sensor_for(rec: Any) -> dict:
    """The profile's sensor section for a recording (RecordingFile): counts_per_g and full scale."""
    side = rec.sidecar
    unit = rec.m_s2_per_unit
    fmt = rec.sample_format
    full_file = side.get("full_scale")
    if full_file is not None and not (isinstance(full_file, (int, float)) and not isinstance(full_file, bool)
                                      and full_file > 0):
        raise EdgevibError(f"{rec.path}: sidecar full_scale must be a positive number, got {full_file!r}")
    if full_file is None:
        if fmt not in _FORMAT_FULL and side.get("m_s2_per_count") is None:
            raise EdgevibError(f"{rec.path}: {fmt} samples carry no full scale: give full_scale (in the file's "
                               "units) or m_s2_per_count in the sidecar")
        full_file = _FORMAT_FULL.get(fmt, _INT16_FULL * side.get("m_s2_per_count", 0) / unit)
    full_m_s2 = float(full_file) * unit
    finest = side.get("m_s2_per_count") or (unit if fmt == "int16" else full_m_s2 / _INT16_FULL)
    cpg = max(1, min(_INT16_FULL + 1, math.floor(units.STANDARD_GRAVITY_M_S2 / finest + 1e-9)))
    scale = units.STANDARD_GRAVITY_M_S2 / cpg
    adc_max = max(1, min(_INT16_FULL, math.floor(full_m_s2 / scale + 1e-9)))
    range_g = max(1, round((adc_max + 1) / cpg))
    if range_g * cpg - 1 <= _INT16_FULL and 50 * abs(range_g * cpg - (adc_max + 1)) > range_g * cpg:
        adc_max = range_g * cpg - 1          # keep the board rule range_g * counts_per_g = full scale
    return {"model": "virtual", "range_g": range_g, "adc_min": -adc_max - 1, "adc_max": adc_max,
            "counts_per_g": cpg}


def desk_profile(recs: Sequence[Any]) -> dict:
    """A desk profile for analysing recordings (RecordingFile) of one sensor (module docstring)."""
    if not recs:
        raise EdgevibError("no recordings given")
    first = recs[0]
    fs = check_rate(first.path, first.sample_rate_hz)
    speeds = [r.rpm for r in recs if r.rpm]
    p = _desk_template()
    p.update(sample_rate_hz=fs, window_n=window_for(fs, min(speeds) if speeds else None), axes=len(first.axes),
             sensor=sensor_for(first), heap_budget_bytes=1 << 26)
    p["name"] = RECORDING_BOARD
    p["description"] = f"desk analysis of {first.path.name} ({len(first.axes)} axes, {fs} Hz)"
    return board.check(p)


def scale_of(profile: dict) -> float:
    """Counts scale of a profile's sensor, m/s^2 per count."""
    return units.STANDARD_GRAVITY_M_S2 / profile["sensor"]["counts_per_g"]


def profile_for_set(params: dict, board_path: str | Path | None, recs: Sequence[Any] = ()) -> dict:
    """The profile to replay parameter set `params` with (module docstring); refuses a set that
    does not fit the board, naming the key."""
    if board_path is None and params.get("board") != RECORDING_BOARD:
        board_path = BOARDS / f"{params.get('board')}.json"
        if not board_path.is_file():
            raise EdgevibError(f"no profile for board {params.get('board')!r} in {BOARDS}; give --board PROFILE.json")
    if board_path is not None:
        prof = load_board(board_path)
    else:
        if not recs:
            raise EdgevibError("a set trained on recordings is replayed with recordings; none given")
        prof = _desk_template()
        sensor = sensor_for(recs[0])
        cpg = params["counts_per_g"]
        adc_max = max(1, min(_INT16_FULL, math.floor(sensor["adc_max"] * sensor["counts_per_g"] / cpg + 1e-9)))
        prof.update(name=RECORDING_BOARD, sample_rate_hz=params["fs_hz"], window_n=params["n"], axes=params["axes"],
                    n_bands=len(params["fc_bands"]), heap_budget_bytes=1 << 26,
                    sensor={"model": "virtual", "range_g": max(1, round((adc_max + 1) / cpg)), "adc_min": -adc_max - 1,
                            "adc_max": adc_max, "counts_per_g": cpg})
    for key, want in (("board", prof["name"]), ("fs_hz", prof["sample_rate_hz"]), ("n", prof["window_n"]),
                      ("axes", prof["axes"]), ("counts_per_g", prof["sensor"]["counts_per_g"])):
        if params.get(key) != want:
            raise EdgevibError(f"the parameter set's {key} {params.get(key)!r} does not match board {prof['name']} ({want!r})")
    return prof


def _desk_template() -> dict:
    return copy.deepcopy(json.loads(DEFAULT_BOARD.read_text(encoding="utf-8")))
