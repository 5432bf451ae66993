"""Made the version-2 model files in tests/data with baggr at commit 1eedb06 (run from the repository root).
Kept as the record of how they were made; running it with a later baggr writes a later format."""
import sys
import numpy as np
import pyarrow.csv as pacsv
import baggr
sys.path.insert(0, "tests")
cols = pacsv.read_csv("tests/data/v1_classes_rows.csv")
rcols = pacsv.read_csv("tests/data/v1_regression_rows.csv")
y = np.array(cols.column("x5").to_pylist())           # the rows' own x5 split in three bands: the classes
cls = np.where(y < -1, "low", np.where(y < 1, "mid", "high"))
X = cols.drop(["x5"])
out = {}
for name, cfg in (("v2_hard", baggr.Config(members=6, seed=3, threads=1)),
                  ("v2_shares", baggr.Config(members=5, seed=4, threads=1, vote="shares", min_leaf=3))):
    ens = baggr.train(X, cls, cfg)
    assert ens.compact.has_cat, name
    ens.save(f"tests/data/{name}.npz")
    out[name + "_shares"] = ens.vote_shares(cols)
yr = np.array(rcols.column("x0").to_pylist()) * 3 + np.nan_to_num(np.array(rcols.column("x2").to_pylist()))
ens = baggr.train(rcols.drop(["x0"]), yr, baggr.Config(members=5, seed=5, threads=1, depth_limit=6))
ens.save("tests/data/v2_regression.npz")
out["v2_regression_predict"] = ens.predict(rcols)
np.savez("tests/data/v2_expected.npz", **out)
for name in ("v2_hard", "v2_shares"):
    e = baggr.load(f"tests/data/{name}.npz")
    np.testing.assert_array_equal(e.vote_shares("tests/data/v1_classes_rows.csv"), out[name + "_shares"])
e = baggr.load("tests/data/v2_regression.npz")
np.testing.assert_array_equal(e.predict("tests/data/v1_regression_rows.csv"), out["v2_regression_predict"])
print("ok")
