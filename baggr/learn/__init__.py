"""Members grow here: counter-based streams (rng), bootstrap draws (draw), the tree learner (tree)
and its split search; each `*_kernels` module holds the numba code its neighbour calls."""
