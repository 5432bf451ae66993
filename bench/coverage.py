"""Does the estimate of the kept ensemble's error hold? Coverage, bias and width on published problems.

For each generator, table size n and repeat: one run of 300 members (seed = repeat, fresh data
each repeat); after M members (M in 25, 50, 100, 300, the same run: member m depends only on
(data, seed, m), so the first M members are an M-member run) the ensemble's `oob.error` and
`oob.interval` are read, and the kept M-member ensemble is scored on 20,000 fresh rows. Per cell:

  cover    share of repeats whose 95% interval holds the 20,000-row test error (+- its Monte
           Carlo standard error); `true` the same against the kept ensemble's exact error where
           the generator gives it (label noise integrated out: P(class | x) of twonorm and
           threenorm, f(x) and noise variance 1 of Friedman #1), free of the test rows' own noise
  +test    the 20,000-row test error within the interval widened by the test rows' own noise
           (their 95% half-width added in quadrature): what a calibrated interval for the kept
           ensemble's error holds it at
  bias     mean of estimate - test error, +- its standard error; `raw` the same for the textbook
           OOB error
  w/wil    mean interval width over the mean width of Wilson's interval at the estimate with the
           covered rows (regression: over the normal interval of the test-row MSE's spread at n)
  w/now    mean width over the mean width of the interval baggr printed before (Wilson at the
           textbook OOB error; regression: normal interval of the OOB squared errors)
  limit    mean error_limit at M minus the test error of the 300-member ensemble
  need     median members_needed

Generators (tests/generators.py): twonorm and threenorm (Breiman 1996), Friedman #1 (1991).

    python bench/coverage.py [--repeats R] [--n 300,1000,3000] [--gens twonorm,threenorm,friedman1]
                             [--sizes 25,50,100,300] [--measure NAME] [--workers 2]
                             [--out FILE.jsonl] [--table FILE.jsonl]
--table prints the tables of an earlier --out file without running anything.

--measure NAME (brier, log-loss, auc, balanced-error; rmse, mae, r2): the same for that measure's
estimate (baggr/oob/measure_fit.py, `oob.measures()`) against the kept ensemble's measure on the
20,000 fresh rows, defined as the README defines it on the OOB shares (tests/test_measure_honest.py);
`raw` is the textbook OOB figure, `true` and the widths are not computed, `limit` is against the
largest size's test figure. Bias in the measure's units x 100 for classes.
"""
if __name__ == "coverage":
    # another bench script's `import coverage` (numba looks for that package) found this file on
    # the path: it is a script, not that package
    raise ImportError("bench/coverage.py is a script, not the coverage package")

import argparse  # noqa: E402
import json
import os  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from multiprocessing import Pool  # noqa: E402

import numpy as np  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
# this file's name is also that of a package numba looks for: keep its folder off the import path
sys.path[:] = [p for p in sys.path if os.path.abspath(p or ".") != HERE]
sys.path.insert(0, os.path.join(HERE, "..", "tests"))
from generators import friedman1, friedman1_mean, threenorm, threenorm_p1, twonorm, twonorm_p1  # noqa: E402

SIZES = (25, 50, 100, 300)
TEST_ROWS = 20_000
GENS = {"twonorm": (twonorm, twonorm_p1), "threenorm": (threenorm, threenorm_p1),
        "friedman1": (friedman1, friedman1_mean)}


def one_measure(task):
    """One run read at every size for one measure other than the error: a list of records."""
    import baggr
    from baggr.engine import Training
    from test_measure_honest import _test_class_measures, _test_regression_measures

    gen, n, rep, measures, sizes = task
    make, _ = GENS[gen]
    X, y = make(n, 10_000 * n + rep)
    Xt, yt = make(TEST_ROWS, 900_000_000 + 10_000 * n + rep)
    tr = Training(X, y, baggr.Config(members=max(sizes), seed=rep, threads=1))
    out = []
    t0 = time.perf_counter()
    for m in sizes:
        ens = tr.run(until=m)
        o = ens.oob
        tests = (_test_class_measures if ens.task == "classes" else _test_regression_measures)(ens, Xt, yt, m)
        for measure in measures:
            est = o.measure_estimate(measure)
            raw = o.raw_measures()[measure]
            out.append({"gen": gen, "n": n, "rep": rep, "M": m, "measure": measure, "est": est["value"],
                        "lo": est["interval"][0], "hi": est["interval"][1], "raw": raw[0], "raw_lo": raw[1][0],
                        "raw_hi": raw[1][1], "test": tests[measure], "limit": est["limit"],
                        "need": est["members_needed"]})
    for r in out:
        r["test_last"] = [q for q in out if q["measure"] == r["measure"]][-1]["test"]
        r["seconds"] = time.perf_counter() - t0
    return out


def measure_table(records):
    cells = {}
    for r in records:
        cells.setdefault((r["measure"], r["gen"], r["n"], r["M"]), []).append(r)
    print(f"{'measure':8s} {'generator':10s} {'n':>5s} {'M':>4s} {'reps':>4s}  {'cover':>12s} {'raw cover':>9s}  "
          f"{'bias':>13s} {'raw':>13s}  {'width':>7s} {'limit':>7s} {'need':>6s}")
    for key in sorted(cells):
        rs = cells[key]
        a = {k: np.array([r[k] if r[k] is not None else np.nan for r in rs], np.float64)
             for k in rs[0] if k not in ("gen", "measure")}
        R = len(rs)
        cover = np.mean((a["lo"] <= a["test"]) & (a["test"] <= a["hi"]))
        raw_cover = np.mean((a["raw_lo"] <= a["test"]) & (a["test"] <= a["raw_hi"]))
        d, dr = a["est"] - a["test"], a["raw"] - a["test"]
        sc = 100.0 if key[1] != "friedman1" else 1.0
        print(f"{key[0]:8s} {key[1]:10s} {key[2]:5d} {key[3]:4d} {R:4d}  {cover * 100:5.1f}% +-{np.sqrt(cover * (1 - cover) / R) * 100:3.1f} "
              f"{raw_cover * 100:8.1f}%  {d.mean() * sc:+6.3f}+-{d.std(ddof=1) / np.sqrt(R) * sc:5.3f} "
              f"{dr.mean() * sc:+6.3f}+-{dr.std(ddof=1) / np.sqrt(R) * sc:5.3f}  {np.mean(a['hi'] - a['lo']) * sc:7.3f} "
              f"{np.nanmean(a['limit'] - a['test_last']) * sc:+7.3f} {np.nanmedian(a['need']):6.0f}")
    print("(bias, raw, width and limit x 100 for classes; limit: mean limit minus the largest size's test figure)")


def one(task):
    """Train one run and read every size: a list of records."""
    import baggr
    from baggr.engine import Training
    from baggr.oob.intervals import normal_mean, wilson

    gen, n, rep = task[:3]
    if len(task) > 3 and task[3]:
        return one_measure(task)
    make, truth = GENS[gen]
    X, y = make(n, 10_000 * n + rep)
    Xt, yt = make(TEST_ROWS, 900_000_000 + 10_000 * n + rep)
    exact = truth(Xt)
    tr = Training(X, y, baggr.Config(members=max(SIZES), seed=rep, threads=1))
    out = []
    t0 = time.perf_counter()
    for m in SIZES:
        ens = tr.run(until=m)
        o = ens.oob
        pred = ens.predict(Xt, members=m)
        if ens.task == "classes":
            lab = np.asarray(pred, dtype=np.int64)
            test = float(np.mean(lab != yt))
            true = float(np.mean(np.where(lab == 1, 1 - exact, exact)))
            cov = o.covered
            w = wilson(round(o.error * cov), cov)
            ref_width = w[1] - w[0]
        else:
            pred = np.asarray(pred, np.float64)
            sq = (pred - yt) ** 2
            test = float(np.mean(sq))
            true = float(np.mean((pred - exact) ** 2) + 1.0)
            # the width a plain normal interval would have from n test rows of this spread
            ref_width = 2 * 1.959964 * float(np.std(sq, ddof=1)) / np.sqrt(o.covered)
        now = o.raw_interval
        out.append({"gen": gen, "n": n, "rep": rep, "M": m, "est": o.error, "var": o.variance, "lo": o.interval[0], "hi": o.interval[1],
                    "raw": o.raw_error, "now_width": now[1] - now[0], "ref_width": ref_width, "test": test,
                    "true": true, "limit": o.error_limit, "need": o.members_needed,
                    "limit_lo": o.error_limit_interval[0], "limit_hi": o.error_limit_interval[1]})
    for r in out:
        r["test_last"] = out[-1]["test"]
        r["seconds"] = time.perf_counter() - t0
    return out


def table(records):
    cells = {}
    for r in records:
        cells.setdefault((r["gen"], r["n"], r["M"]), []).append(r)
    print(f"{'generator':10s} {'n':>5s} {'M':>4s} {'reps':>4s}  {'cover':>12s} {'true':>6s} {'+test':>6s}  {'bias':>13s} "
          f"{'raw':>7s}  {'w/wil':>5s} {'w/now':>5s}  {'limit':>7s} {'need':>6s}")
    for key in sorted(cells, key=lambda k: (list(GENS).index(k[0]), k[1], k[2])):
        rs = cells[key]
        a = {k: np.array([r[k] if r[k] is not None else np.nan for r in rs], np.float64) for k in rs[0] if k != "gen"}
        R = len(rs)
        cover = np.mean((a["lo"] <= a["test"]) & (a["test"] <= a["hi"]))
        cover_true = np.mean((a["lo"] <= a["true"]) & (a["true"] <= a["hi"]))
        # the 20,000 test rows' own noise, added in quadrature to the interval's half-widths: what a
        # calibrated interval for the kept ensemble's error should hold the test figure at
        if key[0] != "friedman1":
            se_test = np.sqrt(a["test"] * (1 - a["test"]) / TEST_ROWS)
        else:  # ref_width = 2 * 1.96 * sd(squared error) / sqrt(n): back out the sd
            se_test = a["ref_width"] * np.sqrt(key[1]) / (2 * 1.959964) / np.sqrt(TEST_ROWS)
        lo_w = a["est"] - np.hypot(a["est"] - a["lo"], 1.959964 * se_test)
        hi_w = a["est"] + np.hypot(a["hi"] - a["est"], 1.959964 * se_test)
        cover_noise = np.mean((lo_w <= a["test"]) & (a["test"] <= hi_w))
        d = a["est"] - a["test"]
        scale = 100.0 if key[0] != "friedman1" else 1.0
        width = np.mean(a["hi"] - a["lo"])
        print(f"{key[0]:10s} {key[1]:5d} {key[2]:4d} {R:4d}  {cover * 100:5.1f}% +-{np.sqrt(cover * (1 - cover) / R) * 100:3.1f} "
              f"{cover_true * 100:5.1f}% {cover_noise * 100:5.1f}%  {d.mean() * scale:+6.3f}+-{d.std(ddof=1) / np.sqrt(R) * scale:5.3f} "
              f"{np.mean(a['raw'] - a['test']) * scale:+7.3f}  {width / np.mean(a['ref_width']):5.2f} "
              f"{width / np.mean(a['now_width']):5.2f}  {np.nanmean(a['limit'] - a['test_last']) * scale:+7.3f} "
              f"{np.nanmedian(a['need']):6.0f}")
    print("(bias, raw and limit in percentage points for classes, in MSE units for friedman1)")


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=200)
    ap.add_argument("--n", default="300,1000,3000")
    ap.add_argument("--gens", default=",".join(GENS))
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--out", default=None)
    ap.add_argument("--table", default=None)
    ap.add_argument("--measure", default=None, help="a measure other than the error (comma-separated for several)")
    ap.add_argument("--sizes", default=",".join(str(s) for s in SIZES))
    args = ap.parse_args()
    if args.table:
        with open(args.table) as f:
            recs = [json.loads(line) for line in f]
        (measure_table if recs and "measure" in recs[0] else table)(recs)
        return
    sizes = tuple(int(s) for s in args.sizes.split(","))
    measures = tuple(args.measure.split(",")) if args.measure else None
    tasks = [(g, int(n), rep, measures, sizes) for n in args.n.split(",") for g in args.gens.split(",")
             for rep in range(args.repeats)]
    records = []
    t0 = time.time()
    out = open(args.out, "a") if args.out else None
    with Pool(args.workers) as pool:
        for i, recs in enumerate(pool.imap_unordered(one, tasks, chunksize=1)):
            records += recs
            if out:
                for r in recs:
                    out.write(json.dumps(r) + "\n")
                out.flush()
            if (i + 1) % 50 == 0:
                print(f"{i + 1}/{len(tasks)} runs, {time.time() - t0:.0f} s", file=sys.stderr, flush=True)
    (measure_table if args.measure else table)(records)


if __name__ == "__main__":
    main()
