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
                "fleet_replay_msamples_per_s_all_cores", "fleet_scaling_ratio",
                "mpy_added_loop_equiv_per_sample_half_orders", "mpy_added_loop_equiv_per_sample_half_taps"):
        assert key in fig
    assert fig["allocs_per_window"] == 0
    assert fig["replay_stream_windows"] == int(2 * 60 * 3200) // 512     # 2 min at 3200 Hz, windows of 512
    assert fig["window_runs_with_heap_locked"] is True
    assert 0 < fig["core_heap_bytes"] <= 16384
    assert fig["mpy_window_fuel"] > 0 and fig["mpy_naive_float_window_fuel"] > 0
    # viper on the unix port: figures of the right kind (their values are speed: never asserted)
    for key in ("mpy_viper_loop_equiv_per_sample", "mpy_viper_speedup",
                "mpy_unix_bytecode_loop_equiv_per_sample"):
        assert isinstance(fig[key], float) and fig[key] > 0
    assert fig["mpy_viper_same_features_as_bytecode"] is True
    thumb = fig["armv6m_thumb_instructions"]
    assert {"dsp.fft.cfft", "dsp.fft.spectrum", "dsp.features._shape", "dsp.ring.scatter16",
            "dsp.speed._best_candidate", "dsp.envelope._band_in", "dsp.envelope._square",
            "dsp.envelope._rescale", "dsp.envelope._demean", "dsp.envelope._lobe_power",
            "dsp.half_taps._mix", "drivers.unpack_words"} <= set(thumb)
    # the Pico's application feeds its read block once it holds more than 128 frames, read 16 at
    # a time (the profile's FIFO watermark): 144 frames per feed
    assert fig["mpy_viper_feed_block_frames"] == 144
    assert all(isinstance(v, int) and v > 0 for v in thumb.values())
    assert "mpy_viper_loop_equiv_per_sample" in fig["targets_met"]


def test_thumb_instruction_counts_are_deterministic_and_read_real_code():
    """Same compiler, same source: the same counts; and the count of a function known in full
    (ARMv6-M encodings: 16-bit instructions, BL as 32) matches its code length."""
    from pathlib import Path

    from host_tools.ops import native_size
    root = Path(__file__).parent.parent
    assert native_size.thumb_instructions(root) == native_size.thumb_instructions(root)
    # 16-bit movs, 32-bit bl, an ldr/b.n pair over a literal, 16-bit pop: 5 instructions
    code = bytes.fromhex("0020" "00f000f8" "004a01e0" "78563412" "00bd")
    assert native_size.thumb_count(code) == 5
