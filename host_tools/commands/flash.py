"""`edgevib flash PARAMS.msgpack --port PORT [--key-file K]`: put a parameter set on a gateway.

PARAMS.msgpack is the parameter set body: one MessagePack map (version, board, fs_hz, n, axes,
counts_per_g, fc_*, det_* keys; firmware_py/run/params.py). The image is built here
(firmware_py.store.paramstore.build_image, signed when a site key is given), staged in chunks, checked
by the gateway (its CRC must equal ours), committed, read back and compared. The gateway's store
applies a set only once it is complete, verified and committed, so a link lost at any point
leaves the gateway on the set it had.
"""
from __future__ import annotations

import argparse
import time

import msgpack

import firmware_py  # noqa: F401
from firmware_py.store.paramstore import build_image
from host_tools.data.files import load_body
from host_tools.link.device_link import connected, read_key
from host_tools.progress import progress_bar
from host_tools.errors import EdgevibError, LinkError
from host_tools.link import DeviceRefused
from host_tools.ops.param_gate import profile_for, prove

HELP = "upload a parameter set to a gateway, verify, commit and read it back"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("params", metavar="PARAMS.msgpack", help="parameter set body (a MessagePack map)")
    p.add_argument("--port", required=True, help="serial port of the gateway (or the emulator's pty)")
    p.add_argument("--key-file", metavar="K", help="site key file: sign the set (its bytes are the key)")
    p.add_argument("--bind", action="store_true",
                   help="bind the set to this one gateway (its id goes into the signed body)")


def flash(c, image: bytes, progress=None) -> dict:
    """Stage, verify, commit and read back image on client c; {version, crc, bytes, seconds}.

    A refusal by the gateway's store becomes an EdgevibError (the set is wrong for it); a lost
    link stays a LinkError.
    """
    crc = int.from_bytes(image[-4:], "little")
    t0 = time.monotonic()
    try:
        c.param_write(image, progress=progress)
        got = c.param_verify(len(image))
        if got["crc"] != crc:
            raise LinkError(f"gateway computed CRC 0x{got['crc']:08x}, the set has 0x{crc:08x}")
        version = c.param_commit()
    except DeviceRefused as e:
        if e.code == "refused":
            raise EdgevibError(str(e)) from None
        raise
    if c.param_read() != image:
        raise LinkError("the committed set read back from the gateway differs from the one sent")
    info = c.identify()
    if info["param_version"] != version or info["param_crc"] != crc:
        raise LinkError(f"gateway reports version {info['param_version']} CRC 0x{info['param_crc']:08x} "
                        f"after committing version {version} CRC 0x{crc:08x}")
    return {"version": version, "crc": crc, "bytes": len(image), "seconds": time.monotonic() - t0}


def run(args: argparse.Namespace) -> int:
    data, body = load_body(args.params)
    profile = profile_for(body)
    if profile is not None:        # a board the host knows: prove the set runs before sending
        prove(body, profile, args.params)
    key = read_key(args.key_file)
    with connected(args.port, key=key) as c:
        if args.bind:
            gid = c.identify().get("gateway_id")
            if not isinstance(gid, str):
                raise EdgevibError(f"the gateway on {args.port} has no id to bind the set to")
            body["gateway"] = gid
            data = msgpack.packb(body, use_bin_type=True)
        image = build_image(data, key)
        with progress_bar(len(image), "bytes", "upload") as bar:
            sent = [0]

            def advance(done: int, total: int) -> None:
                bar.update(done - sent[0])
                sent[0] = done
            r = flash(c, image, progress=advance)
    signed = (", signed" if key else "") + (", bound to this gateway" if args.bind else "")
    print(f"flashed version {r['version']} (CRC 0x{r['crc']:08x}, {r['bytes']} bytes{signed}) "
          f"to {args.port} in {r['seconds']:.2f} s; read back identical")
    return 0
