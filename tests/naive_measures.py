"""Slow, obvious references for the OOB measures, written from their definitions (plain numpy)."""
import numpy as np


def shares_of(votes):
    """(covered mask, shares of the covered rows)."""
    v = np.asarray(votes, dtype=np.float64)
    k = v.sum(axis=1)
    ok = k > 0
    return ok, v[ok] / k[ok, None]


def log_loss(y, votes):
    """Mean of -log((v_y + 1/2) / (k + C/2)) over covered rows (Krichevsky and Trofimov 1981)."""
    v = np.asarray(votes, dtype=np.float64)
    k = v.sum(axis=1)
    ok = k > 0
    c = v.shape[1]
    return float(np.mean([-np.log((v[r, y[r]] + 0.5) / (k[r] + c / 2)) for r in np.flatnonzero(ok)]))


def brier(y, votes):
    """Mean over covered rows of sum_c (share_c - [y == c])^2 (Brier 1950)."""
    ok, s = shares_of(votes)
    onehot = np.eye(s.shape[1])[np.asarray(y)[ok]]
    return float(np.mean(np.sum((s - onehot) ** 2, axis=1)))


def placements(scores_pos, scores_neg):
    """DeLong's placement values by double loop: each positive's share of negatives below it and
    each negative's share of positives above it, ties counting one half."""
    p = np.asarray(scores_pos, float)
    q = np.asarray(scores_neg, float)
    v10 = np.array([(np.sum(q < x) + 0.5 * np.sum(q == x)) / q.size for x in p])
    v01 = np.array([(np.sum(p > x) + 0.5 * np.sum(p == x)) / p.size for x in q])
    return v10, v01


def delong_variance(scores_pos, scores_neg):
    """S10 / n1 + S01 / n0 (DeLong, DeLong and Clarke-Pearson 1988, sample variances of the placements)."""
    v10, v01 = placements(scores_pos, scores_neg)
    return float(v10.var(ddof=1) / v10.size + v01.var(ddof=1) / v01.size)
