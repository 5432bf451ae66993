"""Real data: palmerpenguins 0.1.6 (CC0; Horst, Hill & Gorman 2020), read from the package's own CSV."""
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

import baggr
from naive import penguins_csv_path


def test_oob_error_far_below_baseline_and_agrees_with_repeated_splits():
    X, y = baggr.read_table(penguins_csv_path(), target="species")
    assert X.num_rows == 344
    species = np.array(y.to_pylist())
    # Majority baseline over the 342 measured rows: 1 - 151/342 = 0.5585 (the dataset's own counts).
    assert round(1 - 151 / 342, 4) == 0.5585
    ens = baggr.train(X, y, baggr.Config(members=150, seed=3))
    assert ens.oob.error < 0.10, ens.oob.error
    # Repeated 70/30 splits: the mean test error is an independent estimate of the same quantity.
    rng = np.random.default_rng(0)
    errs = []
    for s in range(10):
        idx = rng.permutation(344)
        tr, te = np.sort(idx[:241]), np.sort(idx[241:])
        m = baggr.train(X.take(pa.array(tr)), pc.take(y, pa.array(tr)), baggr.Config(members=60, seed=s))
        errs.append(np.mean(m.predict(X.take(pa.array(te))) != species[te]))
    lo, hi = ens.oob.interval
    assert lo <= float(np.mean(errs)) <= hi, (ens.oob.error, (lo, hi), float(np.mean(errs)))
    # Per-class figures exist for all three species.
    assert ens.classes == ["Adelie", "Chinstrap", "Gentoo"]
    assert list(ens.oob.class_rows) == [152, 68, 124]
