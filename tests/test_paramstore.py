import hmac
import random

import msgpack
import pytest

import firmware_py  # noqa: F401
from firmware_py.store import paramstore
from firmware_py.store.paramstore import ParamError, ParamStore, build_image

BOARD = dict(board="p101-gw", fs_hz=3200, n=1024, axes=3)
KEY = b"brackwater site key 01"


def body(version, **over):
    p = dict(BOARD, version=version, bands=[10, 1000], note="P-101 drive end")
    p.update(over)
    return msgpack.packb(p, use_bin_type=True)


def store(root, key=None):
    return ParamStore(str(root), factory=body(0), key=key, cap=4096, **BOARD)


def commit(st, img):
    for off in range(0, len(img), 100):
        st.stage_write(off, img[off:off + 100])
    st.stage_verify(len(img))
    return st.commit()


class PowerCut(Exception):
    pass


class Budget:
    """Counts file events (one per byte written, one per rename or remove); cuts power at 0."""

    def __init__(self, left, corrupt=False):
        self.left = left
        self.used = 0
        self.corrupt = corrupt

    def tick(self):
        if self.left == 0:
            raise PowerCut()
        self.left -= 1
        self.used += 1


class CutFile:
    def __init__(self, path, budget):
        self._f = open(path, "wb")
        self._b = budget

    def write(self, data):
        for i, byte in enumerate(bytes(data)):
            try:
                self._b.tick()
            except PowerCut:
                if self._b.corrupt:   # a torn write leaves a wrong byte where it stopped
                    self._f.write(bytes([byte ^ 0xA5]))
                self._f.close()
                raise
            self._f.write(bytes([byte]))

    def close(self):
        self._f.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        if not self._f.closed:
            self._f.close()


class CutOS:
    def __init__(self, budget):
        import os
        self._os = os
        self._b = budget

    def stat(self, p):
        return self._os.stat(p)

    def rename(self, a, b):
        self._b.tick()
        self._os.rename(a, b)

    def remove(self, p):
        self._b.tick()
        self._os.remove(p)


def run_cut(monkeypatch, budget, fn):
    """Run fn() with file events counted by budget; True if it finished before the cut."""
    with monkeypatch.context() as m:
        m.setattr(paramstore, "os", CutOS(budget))
        m.setattr(paramstore, "open",
                  lambda p, mode="r": CutFile(p, budget) if "w" in mode else open(p, mode),
                  raising=False)
        try:
            fn()
            return True
        except PowerCut:
            return False


def prepared(root, key=None):
    """A store with an older set in OLD (v1) and the committed set in CUR (v2)."""
    st = store(root, key)
    commit(st, build_image(body(1), key))
    commit(st, build_image(body(2), key))
    return st


def test_first_boot_is_factory_and_commit_works(tmp_path):
    st = store(tmp_path)
    assert st.source == "factory" and st.version == 0
    assert commit(st, build_image(body(5)))["note"] == "P-101 drive end"
    again = store(tmp_path)
    assert again.version == 5 and again.source == "cur" and again.params["bands"] == [10, 1000]


@pytest.mark.parametrize("corrupt", [False, True])
def test_power_cut_at_every_event_of_commit(tmp_path, monkeypatch, corrupt):
    img = build_image(body(3))
    probe = Budget(10**9)
    (tmp_path / "probe").mkdir()
    st = prepared(tmp_path / "probe")
    assert run_cut(monkeypatch, probe, lambda: commit(st, img))
    total = probe.used
    assert total == len(img) + 3          # every byte, then remove OLD, rename twice
    outcomes = {}
    for cut in range(total + 1):
        root = tmp_path / f"c{cut}"
        root.mkdir()
        st = prepared(root)
        done = run_cut(monkeypatch, Budget(cut, corrupt), lambda: commit(st, img))
        assert done == (cut == total)
        booted = store(root)
        # The old set (v2) or the new one (v3); never v1, never factory, never a broken one.
        assert booted.version in (2, 3), (cut, booted.source)
        assert booted.params["board"] == "p101-gw"
        assert store(root).version == booted.version      # boot is stable
        outcomes[booted.version] = outcomes.get(booted.version, 0) + 1
        if cut < len(img):
            assert booted.version == 2                    # an incomplete write never applies
    print(f"commit cut at {total + 1} points (corrupt={corrupt}): boots {outcomes}")
    assert set(outcomes) == {2, 3}


def test_power_cut_at_every_event_of_rollback(tmp_path, monkeypatch):
    probe = Budget(10**9)
    (tmp_path / "probe").mkdir()
    st = prepared(tmp_path / "probe")
    assert run_cut(monkeypatch, probe, st.rollback)
    assert st.version == 1 and st.previous_version() == 2
    for cut in range(probe.used + 1):
        root = tmp_path / f"r{cut}"
        root.mkdir()
        st = prepared(root)
        run_cut(monkeypatch, Budget(cut), st.rollback)
        assert store(root).version in (1, 2)


def test_power_cut_during_boot_repair(tmp_path, monkeypatch):
    # Leave every state a commit cut can leave, then also cut the repairing boot at every event.
    img = build_image(body(3))
    for cut in range(len(img) - 2, len(img) + 4):
        for boot_cut in range(4):
            root = tmp_path / f"b{cut}_{boot_cut}"
            root.mkdir()
            st = prepared(root)
            run_cut(monkeypatch, Budget(cut), lambda: commit(st, img))
            run_cut(monkeypatch, Budget(boot_cut), lambda: store(root))
            assert store(root).version in (2, 3)


def test_truncated_or_corrupted_current_file_falls_back(tmp_path):
    (tmp_path / "ref").mkdir()
    prepared(tmp_path / "ref")
    cur = (tmp_path / "ref" / "params.cur").read_bytes()
    rng = random.Random(5)
    for off in range(len(cur)):
        for damage in ("truncate", "flip"):
            root = tmp_path / f"{damage}{off}"
            root.mkdir()
            prepared(root)
            data = cur[:off] if damage == "truncate" else (
                cur[:off] + bytes([cur[off] ^ (1 << rng.randrange(8))]) + cur[off + 1:])
            (root / "params.cur").write_bytes(data)
            st = store(root)
            # CRC-32 detects every single-bit error and every truncation here: the old set runs.
            assert st.version == 1 and st.source == "old"


@pytest.mark.parametrize("over,reason", [
    (dict(board="p102-gw"), "board 'p102-gw', this gateway is 'p101-gw'"),
    (dict(fs_hz=1600), "1600 Hz, this gateway samples at 3200 Hz"),
    (dict(n=2048), "windows of 2048 samples, this gateway uses 1024"),
    (dict(axes=1), "1 axes, this gateway has 3"),
    (dict(version="7"), "'version' must be an int"),
])
def test_refuses_set_for_another_gateway(tmp_path, over, reason):
    st = store(tmp_path)
    over = dict(over)
    img = build_image(body(over.pop("version", 4), **over))
    st.stage_write(0, img)
    with pytest.raises(ParamError, match=reason):
        st.stage_verify(len(img))
    with pytest.raises(ParamError, match="nothing verified"):
        st.commit()


def test_refuses_damage_and_missing_keys(tmp_path):
    st = store(tmp_path)
    img = bytearray(build_image(body(4)))
    img[8] ^= 1
    st.stage_write(0, bytes(img))
    with pytest.raises(ParamError, match="CRC"):
        st.stage_verify(len(img))
    no_fs = dict(BOARD, version=4)
    del no_fs["fs_hz"]
    img = build_image(msgpack.packb(no_fs))
    st.stage_write(0, img)
    with pytest.raises(ParamError, match="no 'fs_hz'"):
        st.stage_verify(len(img))
    with pytest.raises(ParamError, match="chunk at offset 100, expected 44"):
        st.stage_write(100, b"x")
    st.stage_write(0, b"abc")
    with pytest.raises(ParamError, match="have 3 bytes staged, expected 9"):
        st.stage_verify(9)
    with pytest.raises(ParamError, match="larger than 4096"):
        st.stage_write(3, bytes(5000))


def test_site_key_rules(tmp_path):
    st = prepared(tmp_path, KEY)
    unsigned = build_image(body(9))
    st.stage_write(0, unsigned)
    with pytest.raises(ParamError, match="only signed"):
        st.stage_verify(len(unsigned))
    forged = build_image(body(9), b"another key")
    st.stage_write(0, forged)
    with pytest.raises(ParamError, match="signature"):
        st.stage_verify(len(forged))
    replay = build_image(body(1), KEY)          # a genuine but older set
    st.stage_write(0, replay)
    with pytest.raises(ParamError, match="version 1 is not newer than committed 2"):
        st.stage_verify(len(replay))
    assert commit(st, build_image(body(3), KEY))["version"] == 3
    with pytest.raises(ParamError, match="signature"):
        st.rollback()
    with pytest.raises(ParamError, match="signature"):
        st.rollback(hmac.new(KEY, paramstore.rollback_message(2, 1), "sha256").digest())
    # The signature (CPython hmac) covers the exact from/to versions.
    sig = hmac.new(KEY, paramstore.rollback_message(3, 2), "sha256").digest()
    assert st.rollback(sig)["version"] == 2
    assert store(tmp_path, KEY).version == 2


def test_rollback_without_previous_refused(tmp_path):
    st = store(tmp_path)
    with pytest.raises(ParamError, match="no previous"):
        st.rollback()
    commit(st, build_image(body(1)))
    with pytest.raises(ParamError, match="no previous"):
        st.rollback()


def test_signed_image_layout(tmp_path):
    # Independent reading of the documented layout with CPython's binascii and hmac.
    import binascii
    b = body(4)
    img = build_image(b, KEY)
    assert img[:4] == b"EVP1" and img[4] == 1
    assert img[5:5 + len(b)] == b
    assert img[5 + len(b):-4] == hmac.new(KEY, img[:5 + len(b)], "sha256").digest()
    assert int.from_bytes(img[-4:], "little") == binascii.crc32(img[:-4])


def test_rename_leaving_both_names(tmp_path):
    # A cut inside a rename on FAT can leave the data under both names; boot must accept both.
    for src, dst, expect in (("cur", "old", 2), ("new", "cur", 3)):
        root = tmp_path / f"{src}{dst}"
        root.mkdir()
        st = prepared(root)
        if src == "new":
            (root / "params.new").write_bytes(build_image(body(3)))
        (root / f"params.{dst}").write_bytes((root / f"params.{src}").read_bytes())
        booted = store(root)
        assert booted.version == expect
        assert not (root / "params.new").exists()
