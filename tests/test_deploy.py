"""`edgevib deploy`: the dry run builds a .mpy for every device module with mpy-cross and prints
the mpremote copy; bad boards and bad parameter files are refused in one line (exit 2); a
module MicroPython cannot compile stops the build and leaves no build folder."""
import os
import shlex
import subprocess
import sys

import msgpack
import pytest

import firmware_py  # noqa: F401
from firmware_py.run import params
from firmware_py.store.paramstore import build_image
from host_tools.ops import deploy
from host_tools.cli import main
from tests.test_typecheck import compile_mpy

ROOT = deploy.ROOT
PICO = "pico_adxl345"


def test_dry_run_builds_every_module_and_lists_the_copies(tmp_path, capsys):
    build = tmp_path / "b"
    assert main(["deploy", "--port", "/dev/ttyACM7", "--board", PICO, "--dry-run",
                 "--build", str(build)]) == 0
    out = capsys.readouterr().out.splitlines()
    modules = deploy.device_modules()
    assert "firmware_py/run/app.py" in modules and "firmware_py/drivers/adxl345.py" in modules
    assert not any(m.endswith("_host_micropython.py") for m in modules)
    # every module of every room (subpackage), listed here by walking the folders independently
    on_disk = {f"{d}/{f}".replace(str(ROOT) + "/", "") for d, _, fs in os.walk(ROOT / "firmware_py")
               if "__pycache__" not in d for f in fs if f.endswith(".py") and f != "_host_micropython.py"}
    assert set(modules) == on_disk
    rooms = {m.split("/")[1] for m in on_disk if m.count("/") == 2}
    assert rooms >= {"dsp", "detect", "codec", "link", "store", "run", "drivers"}
    assert all(f"firmware_py/{r}/__init__.py" in modules for r in rooms)
    for rel in modules:
        mpy = build / (rel[:-3] + ".mpy")
        data = mpy.read_bytes()
        assert len(data) > 4 and data[:1] == b"M"      # .mpy files start with 'M' (format v6)
        assert data[1] == 6                             # the version this mpy-cross emits
        assert any(shlex.split(line)[-1] == rel and str(mpy) in line for line in out)
    assert sorted(p.relative_to(build).as_posix() for p in build.rglob("*.mpy")) == \
        sorted(m[:-3] + ".mpy" for m in modules)
    assert (build / "main.py").read_text() == (ROOT / "device" / "main.py").read_text()
    assert (build / "boot.py").read_text() == (ROOT / "device" / "boot.py").read_text()
    [copy] = [shlex.split(line) for line in out if "mpremote" in line]
    assert copy[:5] == [sys.executable, "-m", "mpremote", "connect", "/dev/ttyACM7"]
    steps = " ".join(copy).split(" + ")
    assert f"fs cp -r {build}/firmware_py :" in steps
    assert f"fs cp {build}/main.py :main.py" in steps and f"fs cp {build}/boot.py :boot.py" in steps
    assert f"fs cp {ROOT}/boards/{PICO}.json :board.json" in steps
    assert steps[0].endswith(f"run {build}/clean.py")
    assert (build / "clean.py").read_text() == deploy.CLEAN_SCRIPT
    assert steps[-1] == "reset"
    assert not any("params.cur" in s for s in steps)


def test_the_built_files_match_mpy_cross_run_directly(tmp_path):
    """Same compiler, same source: the deploy build equals the CI check's own compile."""
    pl = deploy.plan("/dev/null", PICO, tmp_path / "b")
    deploy.build_files(pl, None, echo=lambda s: None)
    # through the package's module entry, not the binary path deploy uses
    for rel in ("firmware_py/run/app.py", "firmware_py/dsp/fft.py"):     # bytecode; native code
        out = tmp_path / "out.mpy"
        r = subprocess.run([sys.executable, "-m", "mpy_cross", "-march=armv6m", "-s", rel, "-o",
                            str(out), rel], cwd=ROOT)
        assert r.returncode == 0
        assert out.read_bytes() == (tmp_path / "b" / (rel[:-3] + ".mpy")).read_bytes()


@pytest.mark.parametrize("name", ["main.py", "boot.py", "clean.py"])
def test_what_the_board_runs_as_source_compiles_for_micropython(name, tmp_path):
    src = ROOT / "device" / name
    if name == "clean.py":
        src = tmp_path / name
        src.write_text(deploy.CLEAN_SCRIPT)
    r = compile_mpy(src, tmp_path / "out.mpy")
    assert r.returncode == 0, r.stderr


def test_a_port_that_never_appears_is_a_link_error(tmp_path, capsys):
    assert main(["deploy", "--port", "/dev/edgevib-no-such-port", "--board", PICO,
                 "--build", str(tmp_path / "b"), "--wait", "0.2"]) == 3
    assert "did not appear within 0.2 s" in capsys.readouterr().err


@pytest.mark.parametrize("board, says", [("nosuch", "unknown board 'nosuch' (boards: "),
                                         ("desk", "virtual gateway")])
def test_a_board_that_cannot_be_deployed_is_one_line_and_exit_2(board, says, tmp_path, capsys):
    assert main(["deploy", "--port", "X", "--board", board, "--dry-run",
                 "--build", str(tmp_path / "b")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and says in err
    assert not (tmp_path / "b").exists()


def factory_body(profile, **changes):
    p = params.factory(profile)
    p.update(changes)
    return msgpack.packb(p, use_bin_type=True)


def test_parameters_go_to_params_cur_checked(tmp_path, capsys):
    _, profile = deploy.board_profile(PICO)
    body = factory_body(profile, version=5)
    src = tmp_path / "p.msgpack"
    src.write_bytes(body)
    build = tmp_path / "b"
    assert main(["deploy", "--port", "P", "--board", PICO, "--dry-run", "--build", str(build),
                 "--params", str(src)]) == 0
    assert (build / "params.cur").read_bytes() == build_image(body)
    assert f"fs cp {build}/params.cur :params.cur" in capsys.readouterr().out
    assert src.read_bytes() == body                           # the input is never modified


@pytest.mark.parametrize("content, says", [
    (b"\x93\x01\x02\x03", "neither a parameter image nor a MessagePack map"),
    ("other-board", "set is for board 'p-102'"),
    ("no-detector", "parameter set refused: set has no 'counts_per_g'"),
])
def test_bad_parameters_are_refused_before_the_build(content, says, tmp_path, capsys):
    _, profile = deploy.board_profile(PICO)
    if content == "other-board":
        content = factory_body(profile, board="p-102")
    elif content == "no-detector":
        content = build_image(msgpack.packb({"version": 1, "board": PICO,
                                             "fs_hz": profile["sample_rate_hz"],
                                             "n": profile["window_n"], "axes": profile["axes"]}))
    src = tmp_path / "bad.bin"
    src.write_bytes(content)
    assert main(["deploy", "--port", "P", "--board", PICO, "--dry-run",
                 "--build", str(tmp_path / "b"), "--params", str(src)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and says in err
    assert not (tmp_path / "b").exists()


def test_a_module_micropython_cannot_compile_stops_the_build(tmp_path, monkeypatch):
    bad = tmp_path / "fw" / "firmware_py"
    bad.mkdir(parents=True)
    (bad / "__init__.py").write_text("")
    (bad / "late.py").write_text("def f(x):\n    match x:\n        case 1:\n            return 2\n")
    monkeypatch.setattr(deploy, "ROOT", tmp_path / "fw")
    monkeypatch.setattr(deploy, "FIRMWARE", bad)
    pl = deploy.plan("P", PICO, tmp_path / "b")
    pl = deploy.Plan(pl.board, pl.build, [c for c in pl.compile_cmds if "firmware_py/" in c[-1]],
                     pl.copy_cmd)
    with pytest.raises(deploy.EdgevibError, match="firmware_py/late.py: mpy-cross cannot compile"):
        deploy.build_files(pl, None, echo=lambda s: None)
    assert not (tmp_path / "b").exists()
    assert [p.name for p in tmp_path.iterdir()] == ["fw"]     # no temporary folder left


@pytest.mark.parametrize("rc", [0, 1])
def test_the_copy_runs_the_printed_command_and_a_failure_is_a_link_error(rc, tmp_path, monkeypatch):
    pl = deploy.plan("COM9", PICO, tmp_path / "b")           # no /dev/ file to wait for
    ran = []

    def fake_run(cmd, cwd=None):
        ran.append(cmd)
        return subprocess.CompletedProcess(cmd, rc)
    monkeypatch.setattr(deploy.subprocess, "run", fake_run)
    printed = []
    if rc == 0:
        deploy.copy_to_board(pl, 0, echo=printed.append)
    else:
        with pytest.raises(deploy.LinkError, match="mpremote failed \\(exit 1\\)"):
            deploy.copy_to_board(pl, 0, echo=printed.append)
    assert ran == [pl.copy_cmd] and printed == [shlex.join(pl.copy_cmd)]


# ---- the board's firmware must run the native code of the build ----------------------------
# Canned sys.version / sys.implementation in the form MicroPython prints them. _mpy is the .mpy
# version | sub-version << 8 | native architecture << 10 (MicroPython docs, reference/mpyfiles):
# armv6m (4) at .mpy 6.3 is 6 + 768 + 4096 = 4870; xtensawin (10) is 6 + 768 + 10240 = 11014.
PICO_124 = ("3.4.0; MicroPython v1.24.1 on 2024-11-29",
            "(name='micropython', version=(1, 24, 1, ''), _machine='Raspberry Pi Pico with RP2040', "
            "_mpy=4870)")
PICO_122 = ("3.4.0; MicroPython v1.22.2 on 2024-02-22",
            "(name='micropython', version=(1, 22, 2, ''), _machine='Raspberry Pi Pico with RP2040', "
            "_mpy=4614)")                                            # .mpy 6.2
S3_125 = ("3.4.0; MicroPython v1.25.0 on 2025-04-15",
          "(name='micropython', version=(1, 25, 0, ''), _machine='Generic ESP32S3 module with "
          "ESP32S3', _mpy=11014)")
NO_EMITTER = ("3.4.0; MicroPython v1.27.0 on 2026-01-01",
              "(name='micropython', version=(1, 27, 0, ''), _machine='wasi', _mpy=774)")


@pytest.fixture(scope="module")
def built_headers(tmp_path_factory):
    """mpy_header of fft.mpy (it holds viper code) for each board, compiled by deploy's plan."""
    heads = {}
    for board in (PICO, "esp32s3_iis3dwb"):
        build = tmp_path_factory.mktemp(board)
        pl = deploy.plan("P", board, build / "b")
        deploy.build_files(pl, None, echo=lambda s: None)
        heads[board] = deploy.mpy_header(build / "b" / "firmware_py" / "dsp" / "fft.mpy")
    return heads


def test_native_mpy_headers_name_the_boards_cpus(built_headers):
    # .mpy 6.3 with armv6m (4) for the RP2040 and xtensawin (10) for the ESP32-S3: the numbers
    # of MP_NATIVE_ARCH_* (MicroPython py/persistentcode.h, from memory) that deploy expects
    assert built_headers[PICO] == (6, 3, deploy.ARCH_CODE["armv6m"]) == (6, 3, 4)
    assert built_headers["esp32s3_iis3dwb"] == (6, 3, deploy.ARCH_CODE["xtensawin"]) == (6, 3, 10)


@pytest.mark.parametrize("board, firmware, says", [
    (PICO, PICO_124, ""),
    ("esp32s3_iis3dwb", S3_125, ""),
    (PICO, PICO_122, "MicroPython 1.22.2 is older than 1.23.0"),
    ("esp32s3_iis3dwb", PICO_124, "runs armv6m; the build is native code for xtensawin (esp32s3)"),
    (PICO, NO_EMITTER, "runs no native code; the build is native code for armv6m"),
    (PICO, ("3.11.4 (main, Jun  7 2023) [GCC 12.2.0]", "namespace(name='cpython')"),
     "does not run MicroPython"),
    (PICO, (PICO_124[0], "(name='micropython', version=(1, 24, 1, ''))"), "cannot import .mpy"),
], ids=["pico-1.24", "s3-1.25", "pico-1.22", "s3-profile-on-pico", "no-emitter", "cpython",
        "no-mpy"])
def test_firmware_that_cannot_run_the_build_is_refused_with_the_reason(board, firmware, says,
                                                                     built_headers):
    _, profile = deploy.board_profile(board)
    why = deploy.firmware_refusal(profile, *firmware, built_headers[board])
    assert (why == "") if not says else (says in why), why


def test_the_unix_micropython_reports_itself_in_the_form_deploy_reads(built_headers):
    """A real MicroPython's own sys.version and sys.implementation (the unix port, x86-64, of
    the test suite) parse, and a Pico build is refused on it for its architecture."""
    from host_tools.twin.mpy_unix import run_unix
    version, impl = run_unix("import sys\nemit([sys.version, repr(sys.implementation)])\n").out[0]
    _, profile = deploy.board_profile(PICO)
    why = deploy.firmware_refusal(profile, version, impl, built_headers[PICO])
    assert "runs x64; the build is native code for armv6m" in why, why


def test_deploy_reads_the_firmware_first_and_refuses_without_copying(tmp_path, monkeypatch, capsys):
    ran = []

    def fake_run(cmd, cwd=None, capture_output=False, text=False):
        ran.append(cmd)
        if "exec" in cmd:                 # the probe: what a Pico on 1.22 prints
            return subprocess.CompletedProcess(cmd, 0, "\n".join(PICO_122) + "\n", "")
        return subprocess.CompletedProcess(cmd, 0)
    build = tmp_path / "b"
    pl = deploy.plan("COM9", PICO, build)
    deploy.build_files(pl, None, echo=lambda s: None)
    monkeypatch.setattr(deploy.subprocess, "run", fake_run)
    _, profile = deploy.board_profile(PICO)
    with pytest.raises(deploy.EdgevibError, match="firmware refused: MicroPython 1.22.2 is older"):
        deploy.copy_to_board(pl, 0, echo=lambda s: None, profile=profile)
    assert len(ran) == 1 and ran[0][-2:] == ["exec", deploy.PROBE]     # no copy was run
