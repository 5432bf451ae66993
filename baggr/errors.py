"""The errors a user can cause. Every one is a BaggrError with a message that names the problem."""


class BaggrError(Exception):
    """Base of every error a user can cause (bad data, bad settings, bad files)."""


class DataError(BaggrError):
    """The table or target cannot be used as given."""


class ConfigError(BaggrError):
    """A setting is out of range or inconsistent with the data."""


class ModelFileError(BaggrError):
    """A model or checkpoint file is missing, truncated, corrupt or from another format version."""


class RunDirError(BaggrError):
    """A run directory is missing, busy, or cannot be used as asked."""


class ClusterError(BaggrError):
    """A Dask cluster cannot be used: the extra is not installed, the address is wrong, nobody answers."""


class ClusterLostError(ClusterError):
    """The cluster cannot go on mid-run (its scheduler went away, no worker is left, a worker's
    error); the members folded before it are intact, and a resume goes on from there."""
