"""The replay report: every plot written and a real PNG, every reference of the page resolves, the
events table lists the events given, the event spectra read a tone's r.m.s., the ISO lines come
back from the parameter set, ground-truth delays, and the folder is replaced whole or not at all."""
import struct
import zlib
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

import firmware_py  # noqa: F401
from firmware_py.run import board
from firmware_py.detect import iso_zones
from firmware_py.run import params as pm
from host_tools.report import replay_report as report
from host_tools.errors import EdgevibError
from host_tools.data.recording import Recording

REPO = Path(__file__).resolve().parent.parent
PROFILE = board.load(str(REPO / "boards" / "desk.json"))
FS, N = PROFILE["sample_rate_hz"], PROFILE["window_n"]
G = 9.80665
SCALE = G / PROFILE["sensor"]["counts_per_g"]   # m/s^2 per count
T0 = 1_773_000_000.0                            # Unix seconds (an invented date in 2026)
GAP_S = 7200.0
WIN_S = N / FS
TONE_BIN, TONE_M_S2 = 50, 0.5                   # 312.5 Hz, 0.5 m/s^2 peak, on axis z of snapshot 3
PNG_SIGNATURE = bytes.fromhex("89504e470d0a1a0a")   # PNG signature (RFC 2083, section 3.1)


def _params():
    p = pm.factory(PROFILE)
    p.update(det_thr_alert_q8=10 * 256, det_thr_alarm_q8=16 * 256)
    return p


def _recordings(windows=10):
    """Three snapshots two hours apart, noise on every axis; the third carries a tone on z from
    its second window on."""
    rng = np.random.default_rng(7)
    recs = []
    for i in range(3):
        c = rng.normal(0, 2.0, (windows * N, 3))
        c[:, 2] += G / SCALE                      # gravity on z
        if i == 2:
            t = np.arange(windows * N - N) / FS
            c[N:, 2] += TONE_M_S2 / SCALE * np.sin(2 * np.pi * TONE_BIN * FS / N * t)
        recs.append(Recording(path=Path(f"snap{i}.wav"), counts=np.rint(c).astype(np.int16), m_s2_per_count=SCALE,
                              sample_rate_hz=float(FS), axes=("x", "y", "z"),
                              t0_s=T0 + i * GAP_S, machine="P-101", plant="Brackwater pumping station"))
    return recs


def _result(recs):
    """A replay-like result over the recordings' windows (end times, as the replay gives them):
    normal throughout, then alert at window 5 and alarm at window 8 of the third snapshot."""
    t, state, score = [], [], []
    for r in recs:
        for k in range(r.n_frames // N):
            t.append(r.t0_s + (k + 1) * WIN_S)
            state.append("normal")
            score.append(2.0 + 0.1 * k)
    for j in range(len(t) - 5, len(t)):
        state[j], score[j] = "alert", 12.0
    for j in range(len(t) - 2, len(t)):
        state[j], score[j] = "alarm", 25.0
    events = [
        {"stream": "P-101", "t_s": t[-5], "from": "normal", "to": "alert", "reason": "score", "mode": 0,
         "feature": "band 200-400 Hz axis z", "score": 12.0},
        {"stream": "P-101", "t_s": t[-2], "from": "alert", "to": "alarm", "reason": "score", "mode": 1,
         "feature": None, "score": 25.0},
    ]
    windows = {"stream": np.zeros(len(t), int), "t_s": np.array(t), "state": np.array(state, dtype=object),
               "score": np.array(score), "velocity_rms_mm_s": np.linspace(0.5, 6.0, len(t))}
    return {"sample_rate_hz": float(FS), "streams": ["P-101"], "events": events, "windows": windows,
            "summary": {"streams": {"P-101": {"windows": len(t), "alerts": 1, "alarms": 1}}}}


class _Page(HTMLParser):
    """Sources, links, ids and tables (rows of cell texts) of an HTML page."""

    def __init__(self):
        super().__init__()
        self.srcs, self.hrefs, self.ids, self.tables = [], [], set(), []
        self._cell = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "src" in a:
            self.srcs.append(a["src"])
        if "href" in a:
            self.hrefs.append(a["href"])
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "table":
            self.tables.append([])
        elif tag == "tr":
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag):
        if tag in ("td", "th"):
            self.tables[-1][-1].append("".join(self._cell).strip())
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def _png_size(data):
    """Width and height from the IHDR chunk, after checking the signature and the chunk's CRC-32
    (PNG specification, RFC 2083: signature, then IHDR first, CRC over type and data)."""
    assert data[:8] == PNG_SIGNATURE
    length, kind = struct.unpack(">I4s", data[8:16])
    assert kind == b"IHDR" and length == 13
    body = data[16:16 + length]
    assert struct.unpack(">I", data[16 + length:20 + length])[0] == zlib.crc32(kind + body)
    return struct.unpack(">II", body[:8])


def _parse(path):
    page = _Page()
    page.feed(path.read_text(encoding="utf-8"))
    return page


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    recs = _recordings()
    res = _result(recs)
    out = tmp_path_factory.mktemp("rep") / "report"
    truth = {"note": "invented", "start_t0_s": T0, "faults": [
        {"pump": "P-101", "kind": "bearing_outer_race", "start_t0_s": T0 + 2 * GAP_S - 3600.0,
         "end_t0_s": T0 + 3 * GAP_S, "description": "seeded"},
        {"pump": "P-102", "kind": "cavitation", "start_t0_s": T0, "end_t0_s": T0 + GAP_S, "description": "other pump"}]}
    index = report.write_report(out, res, _params(), recs, truth)
    return out, index, res, recs


def test_every_plot_is_written_as_a_png_and_the_page_references_resolve(written):
    out, index, res, _ = written
    assert index == out / "index.html"
    page = _parse(index)
    pngs = sorted(p.name for p in out.glob("*.png"))
    # score, velocity, and one spectrum per raising event (both events raise: alert, alarm)
    assert pngs == ["score.png", "spectrum_01.png", "spectrum_02.png", "velocity.png"]
    assert sorted(page.srcs) == pngs
    for name in pngs:
        w, h = _png_size((out / name).read_bytes())
        assert w > 300 and h > 150
    for href in page.hrefs:
        if href.startswith("#"):
            assert href[1:] in page.ids
        else:
            assert (out / href).is_file()
    assert not list(out.parent.glob(".report.*"))           # no temporary folder left behind


def test_plots_are_not_blank(written):
    from matplotlib import image
    out = written[0]
    for name in ("score.png", "velocity.png", "spectrum_01.png"):
        px = image.imread(str(out / name))[..., :3]
        assert px.std() > 0.05                               # lines, points and text, not a flat page
        assert (np.abs(px - px.reshape(-1, 3).mean(0)) > 0.2).any(axis=-1).mean() > 0.005


def test_events_table_lists_the_events_given_in_order(written):
    _, index, res, _ = written
    tables = _parse(index).tables
    ev = next(t for t in tables if t[0][:4] == ["#", "time", "transition", "reason"])
    rows = ev[1:]
    assert len(rows) == len(res["events"])
    for row, e in zip(rows, res["events"]):
        assert row[2].split() == [e["from"], "→", e["to"]]
        assert row[3] == e["reason"]
        assert row[5] == (e["feature"] or "-")
        assert float(row[6]) == pytest.approx(e["score"])


def test_ground_truth_delay_and_only_this_pumps_faults(written):
    _, index, res, _ = written
    tables = _parse(index).tables
    gt = next(t for t in tables if t[0][0] == "seeded fault")
    assert len(gt) == 2                                       # the header and P-101's fault only
    # the alert came at window 5 of the third snapshot: one hour plus 6 windows after the start
    delay_h = (res["events"][0]["t_s"] - (T0 + 2 * GAP_S - 3600.0)) / 3600
    assert gt[1][4] == f"{delay_h:.1f} h" and gt[1][3].endswith("alert (score)")


def test_event_spectrum_reads_the_tone_rms_at_its_line(written):
    # A steady sine of peak A has r.m.s. A / sqrt(2) (common practice); with power-normalised
    # Hann spectra, the peak bin times the window's noise bandwidth (1.5 bins) reads it.
    _, _, res, recs = written
    p = _params()
    w, events, _ = report.one_stream(res)
    before_t, at_t = report.event_windows(events[0], w, p)
    # the event's window is the 6th of its snapshot: the span shown stops at the snapshot's start
    assert len(at_t) == min(report.at_windows(p), 6) and len(before_t) == report.SPECTRUM_WINDOWS
    src = report._WindowSamples(recs, p)
    at, before = src.mean_square(at_t), src.mean_square(before_t)
    z = 2
    peak = int(np.argmax(at[z, 2:])) + 2
    assert peak == TONE_BIN
    # the span reaches back to the snapshot's first window, which holds no tone: the mean square
    # over the span is the tone's times the share of windows that carry it
    share = (len(at_t) - 1) / len(at_t)
    assert np.sqrt(at[z, peak] * 1.5) == pytest.approx(TONE_M_S2 / np.sqrt(2) * np.sqrt(share), rel=0.03)
    assert before[z, TONE_BIN] < 1e-3 * at[z, TONE_BIN]       # the windows before hold no tone


def test_iso_lines_come_back_from_the_parameter_set():
    # det_iso_bounds are the ISO table (mm/s, iso_zones) times the integer F_VEL units per mm/s,
    # rounded; brought back with the exact calibration they match the table within that
    # rounding: half a unit on each bound plus half a unit per mm/s on the factor.
    p = _params()
    vpm = pm.vel_per_mm_s(p["counts_per_g"])                  # F_VEL units per mm/s
    p.update(det_iso_group=1, det_iso_found="flexible",
             det_iso_bounds=iso_zones.bounds_in_vel_units(1, "flexible", vpm))
    bounds, source = report.iso_bounds_mm_s(p)
    for got, cmm in zip(bounds, iso_zones.DEFAULT_BOUNDS_CMM[(1, "flexible")]):
        assert abs(got - cmm / 100) <= 0.5 / vpm * (1 + cmm / 100) + 1e-12
    assert "group 1, flexible foundation" in source
    assert report.iso_bounds_mm_s({})[0] == (1.4, 2.8, 4.5)


def test_state_band_holds_across_short_gaps_and_leaves_long_ones_blank():
    t = np.array([1.0, 2.0, 3.0, 13.0, 14.0, 1000.0])
    state = np.array([0, 0, 1, 1, 0, 0])
    segs = report.state_segments(t, state, 1.0)
    # usual spacing of the gaps is their median (10 s and 986 s -> 498 s): 10 s is held
    assert segs[0] == (0, 1.0, 3.0)
    assert segs[1] == (1, 3.0, 14.0)
    assert segs[2] == (0, 14.0, 15.0)                          # 986 s > 1.5 x usual: one window only
    assert segs[3] == (0, 1000.0, 1001.0)


def test_detections_and_false_raises_against_ground_truth():
    faults = [{"pump": "P-1", "kind": "loose_cable", "start_t0_s": 100.0, "end_t0_s": 200.0},
              {"pump": "P-1", "kind": "cavitation", "start_t0_s": 300.0, "end_t0_s": 400.0}]
    ev = [{"t_s": 50.0, "from": "normal", "to": "alert", "reason": "score"},        # false alert
          {"t_s": 120.0, "from": "normal", "to": "alert", "reason": "score"},       # not how a cable shows
          {"t_s": 150.0, "from": "alert", "to": "sensor_fault", "reason": "flatline"},
          {"t_s": 250.0, "from": "normal", "to": "sensor_fault", "reason": "clipping"},
          {"t_s": 350.0, "from": "normal", "to": "alarm", "reason": "score"},
          {"t_s": 360.0, "from": "alarm", "to": "alert", "reason": "clear"}]
    d = report.detections(ev, faults)
    assert [x["delay_s"] for x in d] == [50.0, 50.0]
    assert d[0]["detected_as"] == "sensor_fault (flatline)"
    fr = report.false_raises(ev, faults, 0.0, 86400.0)
    assert [e["t_s"] for e in fr["alerts"]] == [50.0]
    assert [e["t_s"] for e in fr["sensor_faults"]] == [250.0]
    assert fr["healthy_days"] == pytest.approx((86400.0 - 200.0) / 86400.0)


def test_bad_out_dir_is_refused_and_a_rerun_replaces_the_report(tmp_path):
    recs = _recordings(windows=6)
    res, p = _result(recs), _params()
    f = tmp_path / "a_file"
    f.write_text("keep me")
    with pytest.raises(EdgevibError, match="not a folder"):
        report.write_report(f, res, p, recs)
    busy = tmp_path / "busy"
    busy.mkdir()
    (busy / "notes.txt").write_text("mine")
    with pytest.raises(EdgevibError, match="other files"):
        report.write_report(busy, res, p, recs)
    assert f.read_text() == "keep me" and sorted(x.name for x in busy.iterdir()) == ["notes.txt"]
    out = tmp_path / "rep"
    report.write_report(out, res, p, recs)
    (out / "stale.png").write_bytes(b"old")
    report.write_report(out, res, p, recs)
    assert not (out / "stale.png").exists() and (out / "score.png").is_file()
    assert sorted(x.name for x in tmp_path.iterdir()) == ["a_file", "busy", "rep"]


def test_a_result_of_several_streams_needs_the_stream_named(tmp_path):
    recs = _recordings(windows=6)
    res = _result(recs)
    res["streams"] = ["P-101", "P-102"]
    with pytest.raises(EdgevibError, match="name one stream"):
        report.write_report(tmp_path / "r", res, _params(), recs)
    index = report.write_report(tmp_path / "r", res, _params(), recs, stream="P-101")
    assert index.is_file()


def test_a_stopped_pump_with_no_events_still_gets_every_plot(tmp_path):
    # nothing evaluated (all idle, score 0) and no events: the plots are drawn from the
    # thresholds and zone lines alone, and the page says there were no events
    recs = _recordings(windows=4)
    res = _result(recs)
    res["events"] = []
    res["windows"]["state"] = np.array(["idle"] * len(res["windows"]["t_s"]), dtype=object)
    res["windows"]["score"] = np.zeros(len(res["windows"]["t_s"]))
    index = report.write_report(tmp_path / "r", res, _params(), recs)
    page = _parse(index)
    assert sorted(page.srcs) == ["score.png", "velocity.png"]
    for name in page.srcs:
        _png_size((tmp_path / "r" / name).read_bytes())
    assert "No events" in index.read_text()
