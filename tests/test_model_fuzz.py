"""Damaged model files, made at random (hypothesis): every one gives a BaggrError on load, or loads
and scores without error; nothing else is ever raised and the process never crashes."""
import os
import struct
import zipfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import baggr
from baggr.model import npzfile
from baggr.model.ensemble import Ensemble
from generators import waveform

DATA = Path(__file__).parent / "data"
FUZZ = settings(max_examples=120, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True)
FUZZ_MAPPED = settings(FUZZ, max_examples=60)
LEVELS = np.array(["clay", "stone", "porcelain", "glass"])


def _rows(n, seed):
    X, y = waveform(n, seed)
    rng = np.random.default_rng(seed)
    cols = {f"x{j}": X[:, j].copy() for j in range(5)}
    cols["x2"][rng.random(n) < 0.1] = np.nan
    cols["kind"] = LEVELS[rng.integers(0, 4, n)]
    return cols, np.array(["a", "b", "c"])[y]


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """A model of today's format of each kind of leaf (the leaf-share one in two parts, as a run writes
    it) and the version-1 and version-2 files kept in tests/data, as bytes; rows to score."""
    d = tmp_path_factory.mktemp("fuzz")
    X, y = _rows(300, 1)
    out = {}
    for vote in ("hard", "shares"):
        ens = baggr.train(X, y, baggr.Config(members=3, seed=2, threads=1, vote=vote, min_leaf=3))
        if vote == "shares":
            from baggr.model.compact import Stack
            ens = Ensemble(ens.schema, ens.binning, ens.config, Stack([ens.compact.head(1), _tail(ens.compact, 1)]),
                           ens.oob, ens.stats)
        ens.save(d / f"{vote}.npz")
        out[f"v3-{vote}"] = (d / f"{vote}.npz").read_bytes()
    ens.save(d / "small.npz", compress=True)
    out["v3-compressed"] = (d / "small.npz").read_bytes()
    for name in ("v1_hard", "v1_regression", "v2_hard"):
        out[name] = (DATA / f"{name}.npz").read_bytes()
    rows = {"v3": _rows(40, 9)[0], "v1_hard": None, "v1_regression": None}
    return d, out, rows


NAMES = ["v3-hard", "v3-shares", "v3-compressed", "v1_hard", "v1_regression", "v2_hard"]


def _tail(c, k):
    """Members k.. of a Compact as a part of their own (offsets and share rows from their first)."""
    from baggr.model.compact import Compact
    a = c.arrays
    s0, l0 = int(a["offset"][k]), int(a["leaf_offset"][k])
    leaves = a["leaves"][l0:].copy()
    first = int(np.sum(a["leaves"][:l0] >= 0))
    leaves[leaves >= 0] -= first
    return Compact({"nodes": a["nodes"][s0:], "offset": a["offset"][k:] - s0, "leaf_offset": a["leaf_offset"][k:] - l0,
                    "leaves": leaves, "shares": a["shares"][first:]}, c.kind, c.n_out)


def _rows_for(files, name):
    if name.startswith("v3"):
        return files[2]["v3"]
    import pyarrow.csv as pacsv
    csv = DATA / ("v1_regression_rows.csv" if "regression" in name else "v1_classes_rows.csv")
    return pacsv.read_csv(csv).slice(0, 40)


def _try(files, name, raw: bytes):
    """Load raw as a model file: a BaggrError is the right answer to damage; a file that loads must score."""
    path = files[0] / "damaged.npz"
    path.write_bytes(raw)
    try:
        ens = baggr.load(path)
    except baggr.BaggrError:
        return False
    X = _rows_for(files, name)
    try:
        ens.predict(X)
        if ens.task == "classes":
            ens.vote_shares(X)
    except baggr.BaggrError:
        pass
    return True


@FUZZ
@given(name=st.sampled_from(NAMES), cut=st.floats(0, 1, exclude_max=True))
def test_truncated(files, name, cut):
    raw = files[1][name]
    assert not _try(files, name, raw[:int(cut * len(raw))])  # a zip cut anywhere loses its directory


@FUZZ
@given(name=st.sampled_from(NAMES), flips=st.lists(st.tuples(st.floats(0, 1, exclude_max=True), st.integers(0, 7)),
                                                    min_size=1, max_size=4))
def test_flipped_bits(files, name, flips):
    raw = bytearray(files[1][name])
    for where, bit in flips:
        raw[int(where * len(raw))] ^= 1 << bit
    _try(files, name, bytes(raw))


# zip records (PKWARE APPNOTE 4.3.7, 4.3.12, 4.3.16): field offset -> width, for the local header,
# the central directory entry and the end of the central directory
LOCAL = {4: 2, 6: 2, 8: 2, 14: 4, 18: 4, 22: 4, 26: 2, 28: 2}
CENTRAL = {6: 2, 8: 2, 10: 2, 16: 4, 20: 4, 24: 4, 28: 2, 30: 2, 32: 2, 34: 2, 42: 4}
END = {4: 2, 6: 2, 8: 2, 10: 2, 12: 4, 16: 4, 20: 2}
SIGS = {b"PK\x03\x04": LOCAL, b"PK\x01\x02": CENTRAL, b"PK\x05\x06": END}


def _records(raw):
    out = []
    for sig, fields in SIGS.items():
        i = raw.find(sig)
        while i >= 0:
            out += [(i, off, width) for off, width in fields.items()]
            i = raw.find(sig, i + 4)
    return out


@FUZZ
@given(name=st.sampled_from(NAMES), pick=st.floats(0, 1, exclude_max=True),
       value=st.one_of(st.sampled_from([0, 1, 8, 9, 12, 14, 93, 95, 99, 0xFFFF, 0xFFFFFFFF, 2 ** 31]),
                       st.integers(0, 2 ** 32 - 1)))
def test_rewritten_zip_headers(files, name, pick, value):
    raw = bytearray(files[1][name])
    records = _records(bytes(raw))
    at, off, width = records[int(pick * len(records))]
    raw[at + off:at + off + width] = struct.pack("<H" if width == 2 else "<I", value % (1 << (8 * width)))
    _try(files, name, bytes(raw))


def test_compression_field_set_to_an_unknown_method(files):
    # the case found before: a compression method zipfile does not know raised NotImplementedError
    raw = bytearray(files[1]["v3-hard"])
    for at, off, width in _records(bytes(raw)):
        if (off == 8 and raw[at:at + 4] == b"PK\x03\x04") or (off == 10 and raw[at:at + 4] == b"PK\x01\x02"):
            raw[at + off:at + off + 2] = struct.pack("<H", 99)
    assert not _try(files, "v3-hard", bytes(raw))


def _arrays(files, name):
    path = files[0] / "src.npz"
    path.write_bytes(files[1][name])
    return npzfile.read(path, map_arrays=False)


EXTREMES = [-1, 0, 1, 2, 3, 4, 7, 254, 255, 256, 2 ** 15, 2 ** 31 - 1, -2 ** 31, 2 ** 32 - 1, 2 ** 63 - 1, -2 ** 63, 2 ** 64 - 1]


def _integer_arrays(files, name):
    header, arrays = _arrays(files, name)
    return sorted(k for k, a in arrays.items() if a.dtype.kind in "iub" and a.size)


@FUZZ
@given(name=st.sampled_from(NAMES), pick=st.floats(0, 1, exclude_max=True), where=st.floats(0, 1, exclude_max=True),
       value=st.one_of(st.sampled_from(EXTREMES), st.integers(-2 ** 63, 2 ** 64 - 1)), bits=st.integers(0, 63))
def test_out_of_range_values_in_every_integer_array(files, name, pick, where, value, bits):
    header, arrays = _arrays(files, name)
    keys = sorted(k for k, a in arrays.items() if a.dtype.kind in "iub" and a.size)
    key = keys[int(pick * len(keys))]
    a = arrays[key].copy()
    flat = a.reshape(-1)
    i = int(where * flat.size)
    if key == "tree_nodes":  # a record's fields: rewrite bits..bits+7 (child, flags, threshold, feature)
        flat[i] = (int(flat[i]) & ~(0xFF << bits) | ((value & 0xFF) << bits)) & (2 ** 64 - 1)
    else:
        info = np.iinfo(a.dtype) if a.dtype.kind != "b" else None
        flat[i] = bool(value & 1) if info is None else min(max(value, info.min), info.max)
    arrays[key] = a
    path = files[0] / "rewritten.npz"
    npzfile.write_atomic(path, arrays, header)
    _try(files, name, path.read_bytes())


DTYPES = [np.int8, np.uint8, np.int16, np.int32, np.uint32, np.int64, np.uint64, np.float32, np.float64, np.bool_,
          np.complex128, "S4", ">i8", ">f8"]


@FUZZ
@given(name=st.sampled_from(NAMES), pick=st.floats(0, 1, exclude_max=True), dtype=st.sampled_from(DTYPES),
       reshape=st.booleans())
def test_wrong_dtypes_and_shapes(files, name, pick, dtype, reshape):
    header, arrays = _arrays(files, name)
    keys = sorted(arrays)
    key = keys[int(pick * len(keys))]
    a = arrays[key]
    try:
        b = a.astype(dtype)
    except (TypeError, ValueError):
        b = np.zeros(a.shape, dtype)
    arrays[key] = b.reshape(-1, 1) if reshape else b
    path = files[0] / "retyped.npz"
    try:
        npzfile.write_atomic(path, arrays, header)
    except ValueError:
        return
    loaded = _try(files, name, path.read_bytes())
    if np.dtype(dtype) != a.dtype and np.dtype(dtype).kind in "cS":
        assert not loaded  # a baggr file never holds complex numbers or byte strings


def test_every_integer_array_is_fuzzed(files):
    # the arrays the out-of-range test picks from, for a version-3 file (and its second part, a version-2 file)
    keys = _integer_arrays(files, "v3-hard")
    for k in ("tree0_nodes", "tree0_offset", "tree0_leaf_offset", "tree0_leaves", "bin_binning_offsets",
              "bin_binning_n_bins", "bin_binning_is_cat", "oob_left_out", "oob_pred"):
        assert k in keys
    assert "tree1_leaves" in _integer_arrays(files, "v3-shares") and "tree_nodes" in _integer_arrays(files, "v2_hard")


@pytest.fixture()
def map_everything(monkeypatch):
    monkeypatch.setattr(npzfile, "MAP_BYTES", 0)   # every stored array is mapped, however small
    monkeypatch.setattr(npzfile, "MAP_FILE_BYTES", 0)


def test_stored_arrays_are_aligned_and_mapped(files, map_everything):
    path = files[0] / "aligned.npz"
    path.write_bytes(files[1]["v3-hard"])
    header, arrays = npzfile.read(path)
    for name, a in arrays.items():
        if a.size:
            assert a.ctypes.data % 64 == 0, name          # 64-byte aligned in the mapping
            assert isinstance(a.base, memoryview) or isinstance(getattr(a.base, "base", None), memoryview), name
    with np.load(path) as f:                               # an ordinary .npz for numpy (outside check)
        for name in f.files:
            if name != "header":
                np.testing.assert_array_equal(f[name], arrays[name])


@FUZZ_MAPPED
@given(name=st.sampled_from(["v3-hard", "v3-shares", "v1_hard"]),
       flips=st.lists(st.tuples(st.floats(0, 1, exclude_max=True), st.integers(0, 7)), min_size=1, max_size=3))
def test_flipped_bits_in_mapped_files(files, map_everything, name, flips):
    raw = bytearray(files[1][name])
    for where, bit in flips:
        raw[int(where * len(raw))] ^= 1 << bit
    _try(files, name, bytes(raw))


@FUZZ_MAPPED
@given(name=st.sampled_from(["v3-hard", "v1_regression"]), cut=st.floats(0.5, 1, exclude_max=True))
def test_truncated_mapped_files(files, map_everything, name, cut):
    raw = files[1][name]
    assert not _try(files, name, raw[:int(cut * len(raw))])


def test_a_flipped_bit_in_mapped_data_fails_the_checksum(files, map_everything):
    # an entry larger than zipfile's first read (4 KiB), so only the mapping's own CRC check sees it
    raw = bytearray(files[1]["v3-hard"])
    (files[0] / "src.npz").write_bytes(raw)
    with zipfile.ZipFile(files[0] / "src.npz") as z:
        info = max(z.infolist(), key=lambda i: i.file_size)
    assert info.file_size > 8192
    start = info.header_offset + 30 + len(info.filename) + len(info.extra) + info.file_size - 100   # in the data
    raw[start] ^= 1
    path = files[0] / "flipped.npz"
    path.write_bytes(bytes(raw))
    with pytest.raises(baggr.ModelFileError, match="checksum"):
        baggr.load(path)


def test_a_small_model_cut_short_after_loading_still_scores(files, tmp_path):
    # a file under MAP_FILE_BYTES is read, not mapped: cutting it afterwards cannot fault a later access
    # (a mapped page past a file's end raises SIGBUS: mmap(2), the manual page)
    path = tmp_path / "small.npz"
    path.write_bytes(files[1]["v3-hard"])
    header, arrays = npzfile.read(path)
    before = {k: v.copy() for k, v in arrays.items()}
    os.truncate(path, 100)
    for k, v in arrays.items():
        np.testing.assert_array_equal(v, before[k], err_msg=k)
