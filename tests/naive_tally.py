"""Slow, obvious recounts of the OOB tallies (moved into naive.py once the other sections settle)."""
import numpy as np


def recount_classes(y, n_classes, deltas):
    """Recount everything from the list of member deltas: votes, OOB class (ties to lowest), errors."""
    n = y.shape[0]
    votes = np.zeros((n, n_classes))
    left_out = np.zeros(n, np.int64)
    for d in deltas:
        for i, r in enumerate(d.rows):
            votes[r] += d.votes[i]
            left_out[r] += 1
    covered = left_out > 0
    pred = np.argmax(votes, axis=1)
    confusion = np.zeros((n_classes, n_classes), np.int64)
    for r in np.flatnonzero(covered):
        confusion[y[r], pred[r]] += 1
    wrong = covered & (pred != y)
    class_error = np.array([wrong[y == k].sum() / covered[y == k].sum() if covered[y == k].any() else np.nan
                            for k in range(n_classes)])
    return {"covered": int(covered.sum()), "error": wrong.sum() / covered.sum() if covered.any() else np.nan,
            "confusion": confusion, "class_error": class_error, "left_out": left_out, "pred": pred,
            "votes": votes}


def recount_regression(y, deltas):
    n = y.shape[0]
    total = np.zeros(n)
    count = np.zeros(n)
    for d in deltas:
        for i, r in enumerate(d.rows):
            total[r] += d.votes[i]
            count[r] += 1
    cov = count > 0
    mean = total[cov] / count[cov]
    mse = np.mean((mean - y[cov]) ** 2)
    return {"covered": int(cov.sum()), "mse": mse, "r2": 1 - mse / np.var(y[cov])}
