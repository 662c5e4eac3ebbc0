"""What the host commands share about a connected gateway: opening it by --port, the site key
file, the committed parameter set, raw windows as numpy frames, and the converter's full scale
for a sidecar."""
from __future__ import annotations

import contextlib
import json
from typing import Iterator

import msgpack
import numpy as np

import firmware_py  # noqa: F401
from firmware_py.store.paramstore import FLAG_SIGNED, MAGIC
from host_tools.data.analysis import BOARDS
from host_tools.errors import EdgevibError, LinkError
from host_tools.link import Client

_SIG = 32          # HMAC-SHA256 bytes in a signed image (docs/protocol.md, "Image")
_CRC = 4
MIN_KEY_BYTES = 16


@contextlib.contextmanager
def connected(port: str, timeout_s: float = 1.0, key: bytes | None = None) -> Iterator[Client]:
    """A Client on port (a serial path or transport name), closed on leaving; with the site
    key, the commands a keyed gateway wants signed are signed (firmware_py/link/auth.py)."""
    c = Client.open(port, timeout_s=timeout_s, key=key)
    try:
        yield c
    finally:
        c.close()


def add_key_argument(p) -> None:
    """--key-file for a command that a keyed gateway wants signed."""
    p.add_argument("--key-file", metavar="K",
                   help="site key file: sign the command for a gateway that holds the key")


def read_key(path: str | None) -> bytes | None:
    """The site key: the key file's bytes exactly as stored (no decoding), or None if no file."""
    if path is None:
        return None
    try:
        with open(path, "rb") as f:
            key = f.read()
    except OSError as e:
        raise EdgevibError(f"{path}: cannot read key file ({e.strerror})") from None
    if len(key) < MIN_KEY_BYTES:
        raise EdgevibError(f"{path}: a site key needs at least {MIN_KEY_BYTES} bytes, the file holds {len(key)}")
    return key


def image_body(img: bytes) -> dict:
    """The parameter map of a parameter image (layout of firmware_py.store.paramstore)."""
    if len(img) < len(MAGIC) + 1 + _CRC or img[:4] != MAGIC:
        raise LinkError("the gateway's parameter image has no EVP1 header")
    end = len(img) - _CRC - (_SIG if img[4] & FLAG_SIGNED else 0)
    body = msgpack.unpackb(img[5:end], raw=False, strict_map_key=False)
    if not isinstance(body, dict):
        raise LinkError("the gateway's parameter set is not a map")
    return body


def committed_params(c: Client) -> dict:
    """The parameter set the gateway runs, read back over the link."""
    return image_body(c.param_read())


def raw_frames(raw: bytes, n: int, axes: int, windows: int = 1) -> np.ndarray:
    """Raw windows' bytes (each int16 little-endian counts, axis-major; windows in time order)
    as int16 frames x axes."""
    if len(raw) != 2 * n * axes * windows:
        raise LinkError(f"raw data of {len(raw)} bytes, expected {2 * n * axes * windows} "
                        f"({windows} windows of {n} x {axes} axes)")
    x = np.frombuffer(raw, dtype="<i2").reshape(windows, axes, n)
    return x.transpose(0, 2, 1).reshape(windows * n, axes).astype(np.int16)


def board_full_scale(name: str) -> dict:
    """{"full_scale": adc_max} from this host's profile of board `name` (boards/NAME.json), so
    that `check` judges clipping at the converter's range rather than the int16 limits; {} when
    the host has no profile of that name."""
    path = BOARDS / f"{name}.json"
    if "/" in name or not path.is_file():
        return {}
    return {"full_scale": json.loads(path.read_text())["sensor"]["adc_max"]}
