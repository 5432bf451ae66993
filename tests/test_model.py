"""Model files: round trip, determinism, and damaged or hostile files."""
import json
import subprocess
import sys
import zipfile
from pathlib import Path

import numpy as np
import pytest

import baggr
from baggr.model import npzfile
from generators import waveform

DATA = Path(__file__).parent / "data"


@pytest.fixture(scope="module")
def trained():
    X, y = waveform(300, seed=31)
    ens = baggr.train(X, y, baggr.Config(members=8, seed=2, threads=2))
    return X, y, ens


def test_round_trip_gives_identical_predictions(trained, tmp_path):
    X, y, ens = trained
    path = tmp_path / "model.npz"
    ens.save(path)
    back = baggr.load(path)
    np.testing.assert_array_equal(back.vote_shares(X), ens.vote_shares(X))
    assert list(back.predict(X)) == list(ens.predict(X))
    np.testing.assert_array_equal(back.oob.curve, ens.oob.curve)
    np.testing.assert_array_equal(back.oob.confusion, ens.oob.confusion)
    assert back.oob.interval == ens.oob.interval
    assert back.config == ens.config


def test_threads_one_and_two_are_bit_identical(trained):
    # DESIGN.md invariant: member m depends only on (data, config, seed, m).
    X, y, ens2 = trained
    ens1 = baggr.train(X, y, baggr.Config(members=8, seed=2, threads=1))
    np.testing.assert_array_equal(ens1.oob.curve, ens2.oob.curve)
    for k, v in ens1.forest.arrays.items():
        np.testing.assert_array_equal(v, ens2.forest.arrays[k], err_msg=k)


def test_another_process_gives_the_same_model(trained, tmp_path):
    X, y, ens = trained
    script = (
        "import sys, numpy as np, baggr; sys.path.insert(0, 'tests');"
        "from generators import waveform;"
        "X, y = waveform(300, seed=31);"
        f"baggr.train(X, y, baggr.Config(members=8, seed=2, threads=1)).save({str(tmp_path / 'other.npz')!r})"
    )
    subprocess.run([sys.executable, "-c", script], check=True, timeout=300)
    other = baggr.load(tmp_path / "other.npz")
    for k, v in ens.compact.arrays.items():
        np.testing.assert_array_equal(v, other.forest.arrays[k], err_msg=k)
    np.testing.assert_array_equal(other.oob.curve, ens.oob.curve)


def _rewrite(src, dst, change):
    header, arrays = npzfile.read(src)
    change(header, arrays)
    npzfile.write_atomic(dst, arrays, header)


def _damaged(tmp_path, ens, change):
    good = tmp_path / "good.npz"
    ens.save(good)
    bad = tmp_path / "bad.npz"
    _rewrite(good, bad, change)
    return bad


def test_truncated_file(trained, tmp_path):
    ens = trained[2]
    ens.save(tmp_path / "m.npz")
    raw = (tmp_path / "m.npz").read_bytes()
    for cut in (0, 10, len(raw) // 3, len(raw) - 30):
        (tmp_path / "cut.npz").write_bytes(raw[:cut])
        with pytest.raises(baggr.ModelFileError):
            baggr.load(tmp_path / "cut.npz")


def test_flipped_bytes_never_crash(trained, tmp_path):
    ens = trained[2]
    ens.save(tmp_path / "m.npz")
    raw = bytearray((tmp_path / "m.npz").read_bytes())
    rng = np.random.default_rng(0)
    X = trained[0]
    for trial in range(60):
        b = bytearray(raw)
        for pos in rng.integers(0, len(b), size=3):
            b[pos] ^= 1 << int(rng.integers(0, 8))
        (tmp_path / "flip.npz").write_bytes(bytes(b))
        try:
            back = baggr.load(tmp_path / "flip.npz")
        except baggr.BaggrError:
            continue
        back.predict(X[:20])  # whatever survives validation must score without crashing


@pytest.mark.parametrize("what", ["child_out_of_range", "cycle", "self_loop", "feature_out_of_range",
                                  "wrong_dtype", "missing_array", "bad_mask_index", "nan_value"])
def test_hostile_version_1_trees_are_refused(tmp_path, what):
    def change(header, a):
        inner = np.flatnonzero(a["tree_left"] >= 0)
        i = int(inner[1])
        if what == "child_out_of_range":
            a["tree_left"][i] = 10 ** 6
        elif what == "cycle":
            a["tree_right"][i] = 0  # points back at the root
        elif what == "self_loop":
            a["tree_left"][i] = i
        elif what == "feature_out_of_range":
            a["tree_feature"][i] = 99
        elif what == "wrong_dtype":
            a["tree_threshold"] = a["tree_threshold"].astype(np.float64)
        elif what == "missing_array":
            del a["tree_value"]
        elif what == "bad_mask_index":
            cat = np.flatnonzero(a["tree_is_cat"] == 1)
            a["tree_threshold"][cat[0]] = 10 ** 5
        elif what == "nan_value":
            a["tree_value"][0, 0] = np.nan
    bad = tmp_path / "bad.npz"
    _rewrite(DATA / "v1_hard.npz", bad, change)
    with pytest.raises(baggr.ModelFileError):
        baggr.load(bad)


def _tree0(a):
    """(slot, record, is_inner) of every node of member 0 of a version-3 file (one part), from its root (the
    layout of baggr/model/compact_kernels.py decoded by hand: a leaf points at itself, threshold 255)."""
    nodes = a["tree0_nodes"]
    out, todo = [], [0]
    while todo:
        v = todo.pop()
        r = int(nodes[v])
        inner = not (r & 0xFFFFFFFF == v and (r >> 36) & 255 == 255)
        out.append((v, r, inner))
        if inner:
            c = r & 0xFFFFFFFF
            todo += [c, c + 1]
    return sorted(out)


def _set(a, v, r):
    a["tree0_nodes"] = a["tree0_nodes"].copy()
    a["tree0_nodes"][v] = np.uint64(r)


@pytest.mark.parametrize("what", ["child_out_of_range", "cycle", "self_loop", "feature_out_of_range", "shared_child",
                                  "threshold_out_of_range", "categorical_flag", "leaf_class", "leaf_number",
                                  "leaf_elsewhere", "wrong_dtype", "missing_array", "offsets", "leaf_offsets",
                                  "orphan_slot", "kind"])
def test_hostile_trees_are_refused(trained, tmp_path, what):
    def change(header, a):
        nodes = _tree0(a)
        inner = [(v, r) for v, r, i in nodes if i]
        leaves = [(v, r) for v, r, i in nodes if not i]
        (v, r), (v2, r2) = inner[1], inner[2]
        low, high = r & 0xFFFFFFFF, r & ~0xFFFFFFFF
        if what == "child_out_of_range":
            _set(a, v, high | 10 ** 6)
        elif what == "cycle":
            _set(a, v, high | 0)  # points back at the root
        elif what == "self_loop":
            _set(a, v, high | v)  # an inner node pointing at itself (a walk would never end)
        elif what == "feature_out_of_range":
            _set(a, v, (r & ((1 << 44) - 1)) | (99 << 44))
        elif what == "shared_child":
            _set(a, v2, (r2 & ~0xFFFFFFFF) | low)
        elif what == "threshold_out_of_range":
            _set(a, v, (r & ~(255 << 36)) | (254 << 36) | (1 << 32))  # a categorical split with a threshold
        elif what == "categorical_flag":
            _set(a, v, r | (1 << 32))
        elif what == "leaf_class":
            a["tree0_leaves"] = a["tree0_leaves"].copy()
            a["tree0_leaves"][0] = 3
        elif what == "leaf_number":
            lv, lr = leaves[0]
            _set(a, lv, lr ^ (1 << 44))
        elif what == "leaf_elsewhere":
            lv, lr = leaves[0]
            _set(a, lv, (lr & ~0xFFFFFFFF) | (lv + 1))  # a leaf record that does not point at itself
        elif what == "wrong_dtype":
            a["tree0_nodes"] = a["tree0_nodes"].astype(np.int64)
        elif what == "missing_array":
            del a["tree0_leaf_offset"]
        elif what == "offsets":
            a["tree0_offset"] = a["tree0_offset"].copy()
            a["tree0_offset"][1] += 1
        elif what == "leaf_offsets":
            a["tree0_leaf_offset"] = a["tree0_leaf_offset"].copy()
            a["tree0_leaf_offset"][1] -= 1
        elif what == "orphan_slot":
            n0 = int(a["tree0_offset"][1])
            a["tree0_nodes"] = np.insert(a["tree0_nodes"], n0, np.uint64(0))
            a["tree0_offset"] = a["tree0_offset"] + (np.arange(a["tree0_offset"].shape[0]) >= 1)
        elif what == "kind":
            header["trees"]["kind"] = "values"
    bad = _damaged(tmp_path, trained[2], change)
    with pytest.raises(baggr.ModelFileError):
        baggr.load(bad)


def test_newer_format_version_is_named(trained, tmp_path):
    bad = _damaged(tmp_path, trained[2], lambda h, a: h.update(format_version=99))
    with pytest.raises(baggr.ModelFileError, match="newer"):
        baggr.load(bad)


def test_pickled_arrays_are_refused(trained, tmp_path):
    path = tmp_path / "pickle.npz"
    np.savez(path, header=np.frombuffer(json.dumps({"format": "baggr-model"}).encode(), np.uint8),
             evil=np.array([{"a": 1}], dtype=object))
    with pytest.raises(baggr.ModelFileError, match="never holds"):
        baggr.load(path)


def test_not_a_zip_and_missing_file(tmp_path):
    (tmp_path / "text.npz").write_text("hello")
    with pytest.raises(baggr.ModelFileError):
        baggr.load(tmp_path / "text.npz")
    with pytest.raises(baggr.ModelFileError, match="not found"):
        baggr.load(tmp_path / "nothing.npz")
    with zipfile.ZipFile(tmp_path / "empty.npz", "w"):
        pass
    with pytest.raises(baggr.ModelFileError):
        baggr.load(tmp_path / "empty.npz")


def test_estimate_only_has_no_trees_to_score(trained, tmp_path):
    X, y, _ = trained
    ens = baggr.train(X, y, baggr.Config(members=4, seed=1, keep_members=False))
    assert ens.forest is None and ens.oob.members == 4
    with pytest.raises(baggr.BaggrError, match="estimate-only"):
        ens.predict(X)
    ens.save(tmp_path / "est.npz")
    assert baggr.load(tmp_path / "est.npz").oob.error == ens.oob.error


def test_members_checked_in_spans_name_the_damaged_member(trained, tmp_path, monkeypatch):
    from baggr.model import compact
    monkeypatch.setattr(compact, "CHECK_SPAN", 3)   # 8 members: spans 0-2, 3-5, 6-7 over two threads

    def change(header, a):
        s0 = int(a["tree0_offset"][5])
        r = int(a["tree0_nodes"][s0])   # member 5's root, an inner node
        _set(a, s0, (r & ~0xFFFFFFFF) | 10 ** 6)
    bad = _damaged(tmp_path, trained[2], change)
    with pytest.raises(baggr.ModelFileError, match=r"member 5, slot 0"):
        baggr.load(bad)
    good = tmp_path / "good.npz"
    np.testing.assert_array_equal(baggr.load(good).vote_shares(trained[0]), trained[2].vote_shares(trained[0]))
