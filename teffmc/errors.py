"""Exception classes. Every user-facing failure is a :class:`TeffmcError`.

The command line prints ``str(error)`` on one line and exits with status 2 for
the input errors below; anything else is an internal error (status 1).
"""

__all__ = [
    "TeffmcError",
    "ConfigError",
    "DataError",
    "GridError",
    "OffGridError",
    "ClusterError",
    "ConvergenceWarning",
]


class TeffmcError(Exception):
    """Base class of all errors raised on purpose by teffmc."""


class ConfigError(TeffmcError):
    """A configuration file is invalid. The message names file, key and value."""

    def __init__(self, message, *, file=None, key=None, value=None):
        self.file, self.key, self.value = file, key, value
        where = ":".join(str(p) for p in (file, key) if p is not None)
        super().__init__(f"{where}: {message}" if where else message)


class DataError(TeffmcError):
    """An observation file is unusable. The message names file and column."""

    def __init__(self, message, *, file=None, column=None, value=None):
        self.file, self.column, self.value = file, column, value
        where = ":".join(str(p) for p in (file, column) if p is not None)
        super().__init__(f"{where}: {message}" if where else message)


class ClusterError(TeffmcError):
    """The Dask cluster of a batch cannot be reached or was lost mid-batch.

    Not an input error: the command line exits with status 1. Finished stars and
    sampler checkpoints are kept, so re-running the same command resumes.
    """


class GridError(TeffmcError):
    """A photosphere grid file is malformed or cannot serve the request."""


class OffGridError(GridError):
    """A requested (Teff, log g, [M/H]) lies outside the grid.

    Attributes
    ----------
    point : dict
        The requested parameter values.
    bounds : dict
        ``{name: (low, high)}`` of the grid axes.
    """

    def __init__(self, point, bounds, epoch=None):
        self.point, self.bounds, self.epoch = dict(point), dict(bounds), epoch
        bad = [
            f"{k}={v:g} not in [{bounds[k][0]:g}, {bounds[k][1]:g}]"
            for k, v in self.point.items()
            if k in bounds and not (bounds[k][0] <= v <= bounds[k][1])
        ]
        where = "" if epoch is None else f" (epoch {epoch})"
        super().__init__(f"point outside the grid{where}: "
                         + ("; ".join(bad) or str(self.point)))


class ConvergenceWarning(UserWarning):
    """The sampler stopped before its convergence criterion was met."""
