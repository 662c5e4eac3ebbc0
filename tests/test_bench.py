"""edgevib bench prints its figures as JSON; the deterministic ones are checked here (speed is
measured and printed, never asserted)."""
import json
import subprocess
import sys


def test_bench_json_has_every_figure_and_the_deterministic_ones_hold():
    out = subprocess.run([sys.executable, "-m", "host_tools.cli", "bench", "--json", "--stream-minutes", "2"],
                         capture_output=True, text=True, check=True).stdout
    fig = json.loads(out)
    for key in ("mpy_loop_equiv_per_sample", "mpy_naive_float_ratio", "core_heap_bytes",
                "allocs_per_window", "host_msamples_per_s", "host_vs_numpy_rfft_ratio",
                "train_s_per_hour", "replay_msamples_per_s", "replay_msamples_per_s_2_jobs",
                "replay_peak_rss_mb", "numpy_rfft_same_windows_s", "replay_vs_numpy_rfft_ratio", "fleet_replay_msamples_per_s_1_worker",
                "fleet_replay_msamples_per_s_all_cores", "fleet_scaling_ratio"):
        assert key in fig
    assert fig["allocs_per_window"] == 0
    assert fig["replay_stream_windows"] == int(2 * 60 * 3200) // 512     # 2 min at 3200 Hz, windows of 512
    assert fig["window_runs_with_heap_locked"] is True
    assert 0 < fig["core_heap_bytes"] <= 16384
    assert fig["mpy_window_fuel"] > 0 and fig["mpy_naive_float_window_fuel"] > 0
