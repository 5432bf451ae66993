"""numba kernels of the compact forest: packing the learner's node arrays into 8-byte records, and
checking a loaded compact forest slot by slot before any walk may follow it.

One tree is a run of uint64 slots; slot 0 is its root. An inner node's record:
    bits  0-31  child: slot of the left child, local to the tree; the right child is child + 1
    bits 32-35  flags: CAT (a categorical split), MISSING_LEFT (code 255 goes left); bits 2-3 are 0
    bits 36-43  threshold code of a numeric split, 0..254 (the row goes left when code <= it); 0 for CAT
    bits 44-63  feature
A leaf's record points at itself (child = its own slot), has threshold 255 and MISSING_LEFT, so a
walk that reaches it stays there whatever the code (no code is above 255): rows walk in lock step
without asking whether they have arrived. Its feature field and flag bits 2-3 hold the leaf's
number in its tree (22 bits), counted in slot order; the number indexes the forest's leaf array:
    VOTES   uint16 class the leaf votes for (hard votes)
    VALUES  float64 leaf value, bit for bit (regression)
    SHARES  int32: -1 - class for a leaf holding one class only, else its row of the shares table
A categorical split's 256-bit level set (bit set: the level goes left) sits in the 4 slots after
its two children. Trees are laid out breadth first.
"""
import numpy as np

from baggr.jit import kernel
from baggr.learn.split_kernels import inline

CAT, MISSING_LEFT = 1, 2
VOTES, VALUES, SHARES = 0, 1, 2
LEAF_THRESHOLD = 255
FEATURE_LIMIT = 1 << 20
MAX_LEAVES = 1 << 22
MAX_SLOTS = 1 << 32
M32 = np.uint64(0xFFFFFFFF)

# what check() finds wrong, by code (compact.py words them)
OK, BAD_OFFSETS, BAD_FLAGS, BAD_FEATURE, BAD_THRESHOLD, BAD_CHILD, TWICE, UNREACHED, BAD_LEAF, BAD_KIND, \
    BAD_LEAF_COUNT = range(11)



def leaf_record(slot: int, number: int) -> int:
    """The record of a leaf at `slot` of its tree with leaf number `number` (for tests and tools)."""
    return slot | ((MISSING_LEFT | ((number >> 20) << 2)) << 32) | (LEAF_THRESHOLD << 36) | ((number & 0xFFFFF) << 44)


@kernel
def _leaf_record(slot, number):
    return (np.uint64(slot) | (np.uint64(MISSING_LEFT | ((number >> 20) << 2)) << np.uint64(32))
            | (np.uint64(LEAF_THRESHOLD) << np.uint64(36)) | (np.uint64(number & 0xFFFFF) << np.uint64(44)))


@inline
def leaf_number(r):
    """The leaf number held by a leaf's record."""
    return np.int64(r >> np.uint64(44)) | ((np.int64(r >> np.uint64(34)) & 3) << 20)


@kernel
def pack_count(left, is_cat, value, node_offset, kind):
    """Slots, leaves and (SHARES) impure leaves per tree (int64 [M] each)."""
    m = node_offset.shape[0] - 1
    n_out = value.shape[1]
    slots = np.zeros(m, np.int64)
    leaves = np.zeros(m, np.int64)
    impure = np.zeros(m, np.int64)
    for t in range(m):
        for u in range(node_offset[t], node_offset[t + 1]):
            slots[t] += 1
            if left[u] >= 0:
                if is_cat[u]:
                    slots[t] += 4
                continue
            leaves[t] += 1
            if kind == SHARES:
                ones = 0
                zeros = 0
                for k in range(n_out):
                    if value[u, k] == 1.0:
                        ones += 1
                    elif value[u, k] == 0.0:
                        zeros += 1
                if not (ones == 1 and zeros == n_out - 1):
                    impure[t] += 1
    return slots, leaves, impure


@kernel
def pack_fill(left, right, feature, threshold, is_cat, missing_left, value, cat_masks, node_offset, mask_offset,
              kind, offset, leaf_offset, share_offset, nodes, leaves, shares):
    """Fill nodes (uint64 [S]), leaves ([L], by kind) and shares ([K, n_out]) tree by tree, breadth
    first: each inner node's two children side by side, then its level set."""
    m = node_offset.shape[0] - 1
    n_out = value.shape[1]
    biggest = 0
    for t in range(m):
        biggest = max(biggest, node_offset[t + 1] - node_offset[t])
    queue = np.empty(biggest, np.int64)   # wide node index, local; its slot is where[]
    where = np.empty(biggest, np.int64)
    for t in range(m):
        base, s0, l0, k = node_offset[t], offset[t], leaf_offset[t], share_offset[t]
        queue[0], where[0] = 0, 0
        head, tail, free, n_leaf = 0, 1, 1, 0
        while head < tail:   # slots are handed out in the order nodes leave the queue
            u, v = base + queue[head], where[head]
            head += 1
            if left[u] < 0:
                nodes[s0 + v] = _leaf_record(v, n_leaf)
                if kind == VALUES:
                    leaves[l0 + n_leaf] = value[u, 0]
                elif kind == VOTES:
                    b = 0
                    for j in range(1, n_out):
                        if value[u, j] > value[u, b]:
                            b = j
                    leaves[l0 + n_leaf] = b
                else:
                    ones, zeros, b = 0, 0, 0
                    for j in range(n_out):
                        if value[u, j] == 1.0:
                            ones += 1
                            b = j
                        elif value[u, j] == 0.0:
                            zeros += 1
                    if ones == 1 and zeros == n_out - 1:
                        leaves[l0 + n_leaf] = -1 - b
                    else:
                        for j in range(n_out):
                            shares[k, j] = value[u, j]
                        leaves[l0 + n_leaf] = k
                        k += 1
                n_leaf += 1
                continue
            c = free
            free += 6 if is_cat[u] else 2
            flags = (CAT if is_cat[u] else 0) | (MISSING_LEFT if missing_left[u] else 0)
            thr = 0 if is_cat[u] else threshold[u]
            nodes[s0 + v] = np.uint64(c) | (np.uint64(flags) << np.uint64(32)) | (np.uint64(thr) << np.uint64(36)) \
                | (np.uint64(feature[u]) << np.uint64(44))
            if is_cat[u]:
                for w in range(4):
                    nodes[s0 + c + 2 + w] = cat_masks[mask_offset[t] + threshold[u], w]
            queue[tail], where[tail] = left[u], c
            queue[tail + 1], where[tail + 1] = right[u], c + 1
            tail += 2


@kernel
def check(nodes, offset, leaf_offset, leaves, n_shares, kind, n_out, feature_is_cat):
    """(code, tree, slot, 0) of the first fault found among the trees offset and leaf_offset span
    (absolute offsets into nodes and leaves; the caller checks that they cover both arrays),
    (OK, -1, -1, categorical splits) if none: every slot of a tree is reached exactly once from its
    root, children lie after their parent and inside the tree, features and thresholds are in
    range, leaves point at themselves, are numbered in slot order and hold payloads in range.
    Nothing here follows an unchecked index."""
    m = offset.shape[0] - 1
    if kind < 0 or kind > 2:
        return BAD_KIND, -1, -1, 0
    biggest = 0
    for t in range(m):
        size = offset[t + 1] - offset[t]
        if size < 1 or leaf_offset[t + 1] - leaf_offset[t] < 1:
            return BAD_OFFSETS, t, -1, 0
        biggest = max(biggest, size)
    sets = 0
    state = np.zeros(biggest, np.uint8)   # 0 unreached, 1 node, 3 level-set word
    p = feature_is_cat.shape[0]
    for t in range(m):
        s0, l0, l1 = offset[t], leaf_offset[t], leaf_offset[t + 1]
        size = offset[t + 1] - s0
        state[:size] = 0
        state[0] = 1
        n_leaf = 0
        for v in range(size):
            st = state[v]
            if st == 0:
                return UNREACHED, t, v, 0
            if st == 3:
                continue
            r = nodes[s0 + v]
            c = np.int64(r & M32)
            flags = np.int64(r >> np.uint64(32)) & 15
            thr = np.int64(r >> np.uint64(36)) & 255
            if thr == LEAF_THRESHOLD and (flags & CAT) == 0:
                if c != v or (flags & MISSING_LEFT) == 0:
                    return BAD_LEAF, t, v, 0
                if leaf_number(r) != n_leaf or l0 + n_leaf >= l1:
                    return BAD_LEAF_COUNT, t, v, 0
                x = leaves[l0 + n_leaf]
                n_leaf += 1
                if kind == VALUES:
                    y = np.float64(x)
                    if not (y - y == 0.0):   # NaN or infinity
                        return BAD_LEAF, t, v, 0
                elif kind == VOTES:
                    if np.int64(x) < 0 or np.int64(x) >= n_out:
                        return BAD_LEAF, t, v, 0
                elif np.int64(x) >= n_shares or np.int64(x) < -n_out:
                    return BAD_LEAF, t, v, 0
                continue
            f = np.int64(r >> np.uint64(44))
            if flags > 3:
                return BAD_FLAGS, t, v, 0
            if f >= p:
                return BAD_FEATURE, t, v, 0
            cat = (flags & CAT) != 0
            if cat != (feature_is_cat[f] != 0):
                return BAD_FLAGS, t, v, 0
            if cat and thr != 0:
                return BAD_THRESHOLD, t, v, 0
            width = 6 if cat else 2
            if c <= v or c + width > size:
                return BAD_CHILD, t, v, 0
            for w in range(width):
                if state[c + w] != 0:
                    return TWICE, t, c + w, 0
            state[c] = 1
            state[c + 1] = 1
            if cat:
                sets += 1
                for w in range(2, width):
                    state[c + w] = 3
        if n_leaf != l1 - l0:
            return BAD_LEAF_COUNT, t, -1, 0
    return OK, -1, -1, sets


@kernel
def count_sets(nodes, offset):
    """Categorical splits of a checked compact forest (each takes 4 slots for its level set)."""
    m = offset.shape[0] - 1
    sets = 0
    biggest = 0
    for t in range(m):
        biggest = max(biggest, offset[t + 1] - offset[t])
    kind = np.zeros(biggest, np.uint8)
    for t in range(m):
        s0, size = offset[t], offset[t + 1] - offset[t]
        kind[:size] = 0
        # a parent lies before its children, so one pass in slot order meets every record
        for v in range(size):
            if kind[v] == 3:
                continue
            r = nodes[s0 + v]
            flags = np.int64(r >> np.uint64(32)) & 15
            if flags & CAT:
                sets += 1
                c = np.int64(r & M32)
                for w in range(2, 6):
                    kind[c + w] = 3
    return sets


@kernel
def unpack(nodes, offset, leaf_offset, leaves, shares, kind, left, right, feature, threshold, is_cat, missing_left,
           value, cat_masks, node_offset, mask_offset):
    """The learner's node arrays of a checked compact forest (the inverse of pack_fill, for nodes in
    slot order): leaf values become one-hot classes (VOTES, pure SHARES), the share row or the
    value. Outputs are sized by the caller (nodes = slots - 4 sets; value zeroed)."""
    m = offset.shape[0] - 1
    biggest = 0
    for t in range(m):
        biggest = max(biggest, offset[t + 1] - offset[t])
    index = np.empty(biggest, np.int64)   # slot -> local node index, -1 for a level-set word
    u0, k0 = 0, 0
    for t in range(m):
        s0, size, l0 = offset[t], offset[t + 1] - offset[t], leaf_offset[t]
        node_offset[t], mask_offset[t] = u0, k0
        index[:size] = 0
        n = 0
        for v in range(size):
            if index[v] < 0:
                continue
            index[v] = n
            n += 1
            r = nodes[s0 + v]
            c = np.int64(r & M32)
            if c != v and (np.int64(r >> np.uint64(32)) & CAT):
                for w in range(2, 6):
                    index[c + w] = -1
        k = 0
        for v in range(size):
            if index[v] < 0:
                continue
            u = u0 + index[v]
            r = nodes[s0 + v]
            c = np.int64(r & M32)
            flags = np.int64(r >> np.uint64(32)) & 15
            thr = np.int64(r >> np.uint64(36)) & 255
            if c == v:
                left[u], right[u], feature[u], threshold[u] = -1, -1, -1, 0
                x = leaves[l0 + leaf_number(r)]
                if kind == VALUES:
                    value[u, 0] = x
                elif kind == VOTES or np.int64(x) < 0:
                    value[u, np.int64(x) if kind == VOTES else -1 - np.int64(x)] = 1.0
                else:
                    for j in range(value.shape[1]):
                        value[u, j] = shares[np.int64(x), j]
                continue
            left[u], right[u] = index[c], index[c + 1]
            feature[u] = np.int64(r >> np.uint64(44))
            missing_left[u] = 1 if flags & MISSING_LEFT else 0
            if flags & CAT:
                is_cat[u] = 1
                threshold[u] = k
                for w in range(4):
                    cat_masks[k0 + k, w] = nodes[s0 + c + 2 + w]
                k += 1
            else:
                threshold[u] = thr
        u0 += n
        k0 += k
    node_offset[m], mask_offset[m] = u0, k0
