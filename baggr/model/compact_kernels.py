"""numba kernels of the compact forest: packing the learner's node arrays into 8-byte records, and
checking a loaded compact forest slot by slot before any walk may follow it.

One tree is a run of uint64 slots; slot 0 is its root. An inner node's record:
    bits  0-31  child: slot of the left child, local to the tree; the right child is child + 1
    bits 32-35  flags: CAT, MISSING_LEFT, LEFT_LEAF, RIGHT_LEAF (the kind of each child)
    bits 36-43  threshold code of a numeric split (the row goes left when code <= it)
    bits 44-63  feature
A categorical split's 256-bit level set (bit set: the level goes left) sits in the 4 slots after
its two children. A leaf's slot is its payload, by the forest's kind:
    VOTES   the class index the leaf votes for (hard votes)
    VALUES  the float64 leaf value, bit for bit (regression)
    SHARES  PURE | class for a leaf holding one class only, else its row of the shares table
Whether the root is a leaf is kept per tree (root_leaf).
"""
import numpy as np

from baggr.jit import kernel

CAT, MISSING_LEFT, LEFT_LEAF, RIGHT_LEAF = 1, 2, 4, 8
VOTES, VALUES, SHARES = 0, 1, 2
PURE = np.uint64(1) << np.uint64(63)
MAX_FEATURES = 1 << 20
MAX_SLOTS = 1 << 32

# what check() finds wrong, by code (compact.py words them)
OK, BAD_OFFSETS, BAD_ROOT, BAD_FLAGS, BAD_FEATURE, BAD_THRESHOLD, BAD_CHILD, TWICE, UNREACHED, BAD_LEAF, \
    BAD_KIND = range(11)


@kernel
def pack_count(left, is_cat, value, node_offset, kind):
    """Slots per tree and, for SHARES, impure leaves per tree (int64 [M] each)."""
    m = node_offset.shape[0] - 1
    n_out = value.shape[1]
    slots = np.zeros(m, np.int64)
    impure = np.zeros(m, np.int64)
    for t in range(m):
        for u in range(node_offset[t], node_offset[t + 1]):
            slots[t] += 1
            if left[u] >= 0:
                if is_cat[u]:
                    slots[t] += 4
            elif kind == SHARES:
                ones = 0
                zeros = 0
                for k in range(n_out):
                    if value[u, k] == 1.0:
                        ones += 1
                    elif value[u, k] == 0.0:
                        zeros += 1
                if not (ones == 1 and zeros == n_out - 1):
                    impure[t] += 1
    return slots, impure


@kernel
def pack_fill(left, right, feature, threshold, is_cat, missing_left, value, value_bits, cat_masks, node_offset,
              mask_offset, kind, tree_offset, share_offset, nodes, root_leaf, shares):
    """Fill nodes (uint64 [S]), root_leaf (uint8 [M]) and shares ([K, n_out]) tree by tree,
    breadth first: each inner node's two children side by side, then its level set. value_bits is
    value viewed as uint64 (a leaf value is copied bit for bit)."""
    m = node_offset.shape[0] - 1
    n_out = value.shape[1]
    biggest = 0
    for t in range(m):
        biggest = max(biggest, node_offset[t + 1] - node_offset[t])
    queue = np.empty(biggest, np.int64)   # wide node index, local
    where = np.empty(biggest, np.int64)   # its slot
    for t in range(m):
        base, s0, k = node_offset[t], tree_offset[t], share_offset[t]
        root_leaf[t] = 1 if left[base] < 0 else 0
        queue[0], where[0] = 0, 0
        head, tail, free = 0, 1, 1
        while head < tail:
            u, s = base + queue[head], s0 + where[head]
            head += 1
            if left[u] < 0:
                if kind == VALUES:
                    nodes[s] = value_bits[u, 0]
                elif kind == VOTES:
                    b = 0
                    for j in range(1, n_out):
                        if value[u, j] > value[u, b]:
                            b = j
                    nodes[s] = np.uint64(b)
                else:
                    ones, zeros, b = 0, 0, 0
                    for j in range(n_out):
                        if value[u, j] == 1.0:
                            ones += 1
                            b = j
                        elif value[u, j] == 0.0:
                            zeros += 1
                    if ones == 1 and zeros == n_out - 1:
                        nodes[s] = PURE | np.uint64(b)
                    else:
                        for j in range(n_out):
                            shares[k, j] = value[u, j]
                        nodes[s] = np.uint64(k)
                        k += 1
                continue
            c = free
            free += 6 if is_cat[u] else 2
            lu, ru = base + left[u], base + right[u]
            flags = (CAT if is_cat[u] else 0) | (MISSING_LEFT if missing_left[u] else 0) \
                | (LEFT_LEAF if left[lu] < 0 else 0) | (RIGHT_LEAF if left[ru] < 0 else 0)
            thr = 0 if is_cat[u] else threshold[u]
            nodes[s] = np.uint64(c) | (np.uint64(flags) << np.uint64(32)) | (np.uint64(thr) << np.uint64(36)) \
                | (np.uint64(feature[u]) << np.uint64(44))
            if is_cat[u]:
                for w in range(4):
                    nodes[s0 + c + 2 + w] = cat_masks[mask_offset[t] + threshold[u], w]
            queue[tail], where[tail] = left[u], c
            queue[tail + 1], where[tail + 1] = right[u], c + 1
            tail += 2


@kernel
def check(nodes, values, tree_offset, root_leaf, n_shares, kind, n_out, feature_is_cat):
    """(code, tree, slot, 0) of the first fault found, (OK, -1, -1, categorical splits) if none: every slot of a tree is
    reached exactly once from its root, children lie after their parent and inside the tree,
    features, thresholds and leaf payloads are in range. Nothing here follows an unchecked index."""
    m = tree_offset.shape[0] - 1
    total = nodes.shape[0]
    if kind < 0 or kind > 2:
        return BAD_KIND, -1, -1, 0
    if tree_offset[0] != 0 or tree_offset[m] != total or root_leaf.shape[0] != m:
        return BAD_OFFSETS, -1, -1, 0
    biggest = 0
    for t in range(m):
        size = tree_offset[t + 1] - tree_offset[t]
        if size < 1:
            return BAD_OFFSETS, t, -1, 0
        biggest = max(biggest, size)
    sets = 0
    state = np.zeros(biggest, np.uint8)   # 0 unreached, 1 inner node, 2 leaf, 3 level-set word
    p = feature_is_cat.shape[0]
    for t in range(m):
        s0 = tree_offset[t]
        size = tree_offset[t + 1] - s0
        state[:size] = 0
        if root_leaf[t] > 1:
            return BAD_ROOT, t, 0, 0
        state[0] = 2 if root_leaf[t] else 1
        for v in range(size):
            st = state[v]
            if st == 0:
                return UNREACHED, t, v, 0
            r = nodes[s0 + v]
            if st == 2:
                if kind == VOTES:
                    if r >= np.uint64(n_out):
                        return BAD_LEAF, t, v, 0
                elif kind == VALUES:
                    if not np.isfinite(values[s0 + v]):
                        return BAD_LEAF, t, v, 0
                elif r & PURE:
                    if (r & ~PURE) >= np.uint64(n_out):
                        return BAD_LEAF, t, v, 0
                elif r >= np.uint64(n_shares):
                    return BAD_LEAF, t, v, 0
                continue
            if st == 3:
                continue
            c = np.int64(r & np.uint64(0xFFFFFFFF))
            flags = np.int64((r >> np.uint64(32)) & np.uint64(15))
            thr = np.int64((r >> np.uint64(36)) & np.uint64(255))
            f = np.int64(r >> np.uint64(44))
            if f >= p:
                return BAD_FEATURE, t, v, 0
            cat = (flags & CAT) != 0
            if cat != (feature_is_cat[f] != 0):
                return BAD_FLAGS, t, v, 0
            if (cat and thr != 0) or (not cat and thr > 254):
                return BAD_THRESHOLD, t, v, 0
            width = 6 if cat else 2
            if c <= v or c + width > size:
                return BAD_CHILD, t, v, 0
            for w in range(width):
                if state[c + w] != 0:
                    return TWICE, t, c + w, 0
            state[c] = 2 if flags & LEFT_LEAF else 1
            state[c + 1] = 2 if flags & RIGHT_LEAF else 1
            for w in range(2, width):
                state[c + w] = 3
            if cat:
                sets += 1
    return OK, -1, -1, sets


@kernel
def count_nodes(nodes, tree_offset, root_leaf):
    """(nodes, categorical splits) of a checked compact forest: nodes are its slots less the level sets."""
    m = tree_offset.shape[0] - 1
    sets = 0
    for t in range(m):
        s0, size = tree_offset[t], tree_offset[t + 1] - tree_offset[t]
        # a parent lies before its children, so one pass in slot order meets every node
        kind = np.zeros(size, np.uint8)
        kind[0] = 2 if root_leaf[t] else 1
        for v in range(size):
            if kind[v] == 1:
                r = nodes[s0 + v]
                c = np.int64(r & np.uint64(0xFFFFFFFF))
                flags = np.int64(r >> np.uint64(32)) & 15
                kind[c] = 2 if flags & LEFT_LEAF else 1
                kind[c + 1] = 2 if flags & RIGHT_LEAF else 1
                if flags & CAT:
                    sets += 1
                    for w in range(2, 6):
                        kind[c + w] = 3
    return nodes.shape[0] - 4 * sets, sets
