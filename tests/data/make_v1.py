"""Made the version-1 model files in tests/data with baggr at commit 909f52b (run from the repository root).
Kept as the record of how they were made; running it with a later baggr writes a later format."""
import sys, numpy as np, baggr, csv
sys.path.insert(0, "tests")
from generators import waveform, friedman1
rng = np.random.default_rng(7)
n = 240
X, y = waveform(n, seed=5)
X = X[:, :6].round(3)
kinds = np.array(["clay", "stone", "porcelain", "glass"])
cat = kinds[rng.integers(0, 4, n)]
# a categorical column that matters: class 2 leans to "glass"
cat[(y == 2) & (rng.random(n) < 0.5)] = "glass"
cols = {f"x{j}": X[:, j].copy() for j in range(6)}
cols["x1"][rng.random(n) < 0.1] = np.nan      # missing values
cols["kind"] = cat
cls = np.array(["low", "mid", "high"])[y]
out = {}
for name, cfg in (("v1_hard", baggr.Config(members=6, seed=3, threads=1)),
                  ("v1_shares", baggr.Config(members=5, seed=4, threads=1, vote="shares", min_leaf=3))):
    ens = baggr.train(cols, cls, cfg)
    assert ens.forest.arrays["cat_masks"].shape[0] > 0, name
    ens.save(f"tests/data/{name}.npz")
    out[name + "_shares"] = ens.vote_shares(cols)
Xr, yr = friedman1(n, seed=6)
rcols = dict(cols); del rcols["kind"]
for j in range(6): rcols[f"x{j}"] = Xr[:, j].round(3)
rcols["x1"][rng.random(n) < 0.1] = np.nan
rcols["kind"] = cat
ens = baggr.train(rcols, yr, baggr.Config(members=5, seed=5, threads=1, depth_limit=6))
ens.save("tests/data/v1_regression.npz")
out["v1_regression_predict"] = ens.predict(rcols)
def write(path, c):
    names = list(c)
    with open(path, "w", newline="") as f:
        w = csv.writer(f); w.writerow(names)
        for i in range(n):
            w.writerow(["" if (isinstance(c[k][i], float) and np.isnan(c[k][i])) else repr(float(c[k][i])) if not isinstance(c[k][i], str) else c[k][i] for k in names])
write("tests/data/v1_classes_rows.csv", cols)
write("tests/data/v1_regression_rows.csv", rcols)
np.savez("tests/data/v1_expected.npz", **out)
# check the csv reading gives the same scores
for name in ("v1_hard", "v1_shares"):
    e = baggr.load(f"tests/data/{name}.npz")
    np.testing.assert_array_equal(e.vote_shares("tests/data/v1_classes_rows.csv"), out[name + "_shares"])
e = baggr.load("tests/data/v1_regression.npz")
np.testing.assert_array_equal(e.predict("tests/data/v1_regression_rows.csv"), out["v1_regression_predict"])
print("ok")
