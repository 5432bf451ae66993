"""baggr: bagged tree ensembles with a single-pass out-of-bag estimate."""
from baggr.version import __version__  # noqa: E402

from baggr.config import Config  # noqa: E402
from baggr.errors import BaggrError, ConfigError, DataError, ModelFileError  # noqa: E402


def load(path):
    """Read a model file, or the model of a run directory (as `baggr predict` takes either)."""
    from baggr.model.ensemble import load as load_file
    from baggr.runs.rundir import model_path
    return load_file(model_path(path))


def __getattr__(name):
    # Lazy: `import baggr` stays light (the journal reader and dashboard never load numba).
    if name == "train":
        from baggr.engine import train
        return train
    if name == "grow":
        from baggr.engine import grow
        return grow
    if name == "read_table":
        from baggr.data import read_table
        return read_table
    if name in ("Ensemble",):
        from baggr.model.ensemble import Ensemble
        return Ensemble
    if name in ("Training",):
        from baggr.engine import Training
        return Training
    raise AttributeError(f"module 'baggr' has no attribute {name!r}")


__all__ = ["Config", "BaggrError", "ConfigError", "DataError", "ModelFileError", "train", "grow", "load",
           "read_table", "Ensemble", "Training", "__version__"]
