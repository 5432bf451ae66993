"""Where members grow. Every backend runs the same pure member function (member.Grower: member m
from the binned data, config, seed and m alone) and hands results back in member order; the engine
folds them. threads: a local thread pool."""
