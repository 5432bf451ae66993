"""Where a member's tally fold goes on R1 (twonorm 100,000 x 20, hard votes, two classes).

Folds the OOB deltas of a few grown members again and again, away from the training loop, and
splits a fold into the kernel and the Python that writes the curve points; beside them a kernel
that only reads what the fold reads (votes and true class of every OOB row) is the floor of
the memory traffic. In the training loop the fold runs while other threads grow, so expect its
share there (bench/speed.py) to sit nearer twice these figures.
    python bench/fold.py [rounds]
"""
import sys
import time

import numpy as np

import baggr
from baggr.oob import tally_kernels
from baggr.backends.member import Grower
from baggr.data.prepared import prepare
from baggr.jit import kernel
from baggr.oob.tally import MemberDelta, Tally
from util import twonorm


@kernel
def _read_only(rows, row_class, y, votes):
    """Reads every value fold_two_hard reads, writes nothing."""
    s = 0
    for i in range(rows.shape[0]):
        r = rows[i]
        s += votes[r, 0] + votes[r, 1] + y[r] + row_class[i]
    return s


def main(rounds=5, members=16):
    X, y = twonorm(100_000, seed=1)
    cfg = baggr.Config(features_per_split=4, seed=1, members=members)
    prep = prepare(X, y, cfg)
    grower = Grower(prep, cfg)
    deltas = [grower.grow_member(0).delta]  # loads the kernels
    t0 = time.perf_counter()
    deltas += [grower.grow_member(m).delta for m in range(1, members)]
    member_s = (time.perf_counter() - t0) / (members - 1)
    fold, kern, floor = np.inf, np.inf, np.inf
    for _ in range(rounds + 1):  # the first round compiles
        t = Tally("classes", prep.y_class, 2, "hard", members)
        t0 = time.perf_counter()
        for d in deltas:
            t.fold(d)
        fold = min(fold, (time.perf_counter() - t0) / members)
        t = Tally("classes", prep.y_class, 2, "hard", members)
        t0 = time.perf_counter()
        for d in deltas:
            tally_kernels.fold_two_hard(d.rows, d.votes, t.y, t.votes, t.confusion, t.class_wrong,
                                        t.class_covered, t.totals)
        kern = min(kern, (time.perf_counter() - t0) / members)
        t0 = time.perf_counter()
        for d in deltas:
            _read_only(d.rows, d.votes, t.y, t.votes)
        floor = min(floor, (time.perf_counter() - t0) / members)
    assert isinstance(deltas[0], MemberDelta) and deltas[0].votes.ndim == 1
    oob = np.mean([d.rows.shape[0] for d in deltas])
    print(f"R1 fold, {members} members, {oob:,.0f} OOB rows per member, best of {rounds} rounds")
    print(f"  member (grow) {member_s * 1e3:.1f} ms; fold {fold * 1e6:.0f} us = {fold / member_s * 100:.2f}% of it")
    print(f"  kernel {kern * 1e6:.0f} us ({kern / oob * 1e9:.1f} ns per OOB row), Python and curve "
          f"points {(fold - kern) * 1e6:.0f} us; reading the same memory alone {floor * 1e6:.0f} us")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
