"""Reading model files for comparisons: the tree parts a run appended one per checkpoint (format 3)
joined into one, with numpy alone, so that two files holding the same trees in different parts
compare equal (where a run checkpointed depends on the clock; what it holds does not)."""
import numpy as np

from baggr.model import npzfile


def read_joined(path):
    """(header, arrays) of a model file with its tree parts joined as one part 0 ("tree0_*") and the
    header's list of parts replaced by the total; other files unchanged."""
    header, arrays = npzfile.read(path)
    trees = header.get("trees")
    if header.get("format_version", 0) < 3 or not isinstance(trees, dict):
        return header, arrays
    parts = trees["parts"]
    got = [{k[len(f"tree{p}_"):]: arrays.pop(k) for k in list(arrays) if k.startswith(f"tree{p}_")}
           for p in range(len(parts))]
    shares_kind = trees["kind"] == "shares"
    nodes, off, loff, leaves, shares = [], [np.zeros(1, np.int64)], [np.zeros(1, np.int64)], [], []
    s = lv = k = 0
    for a in got:
        nodes.append(a["nodes"])
        off.append(a["offset"][1:] + s)
        loff.append(a["leaf_offset"][1:] + lv)
        x = a["leaves"].copy()
        if shares_kind:
            x[x >= 0] += k      # a part's share rows count from its own first
        leaves.append(x)
        shares.append(a["shares"])
        s, lv, k = s + int(a["offset"][-1]), lv + int(a["leaf_offset"][-1]), k + a["shares"].shape[0]
    joined = {"nodes": np.concatenate(nodes), "offset": np.concatenate(off), "leaf_offset": np.concatenate(loff),
              "leaves": np.concatenate(leaves), "shares": np.concatenate(shares)}
    arrays.update({"tree0_" + k: v for k, v in joined.items()})
    header = dict(header, trees=dict(trees, parts=[sum(parts)]))
    return header, arrays
