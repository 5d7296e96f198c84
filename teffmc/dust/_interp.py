"""Batch linear interpolation between the rows of a precomputed table."""

import numpy as np

__all__ = ["RowInterpolator"]


class RowInterpolator:
    """Interpolate rows of ``table`` (n_nodes, n_pix) linearly in a node coordinate.

    Parameters
    ----------
    nodes : numpy.ndarray, shape (n_nodes,)
        Ascending node coordinates (e.g. ln radius or 1/R_V).
    table : numpy.ndarray, shape (n_nodes, n_pix)

    Notes
    -----
    Temporaries go to a work buffer kept between calls, so a call allocates only
    its result: with several (n, n_pix) arrays alive at once, fresh large
    allocations are served by mmap and page faults dominate (measured ~4 ms per
    48 x 4000 temporary on the development machine). Not thread-safe.
    """

    def __init__(self, nodes, table):
        self.nodes = np.asarray(nodes, dtype=np.float64)
        self.table = np.ascontiguousarray(table, dtype=np.float64)
        self.diff = np.diff(self.table, axis=0)
        self._work = None

    def __call__(self, t, out=None):
        """Rows at coordinates ``t`` (shape (n,), inside the nodes), shape (n, n_pix)."""
        nodes = self.nodes
        i = np.clip(np.searchsorted(nodes, t, side="right") - 1, 0, nodes.size - 2)
        w = ((t - nodes[i]) / (nodes[i + 1] - nodes[i]))[:, None]
        shape = (t.size, self.table.shape[1])
        if self._work is None or self._work.shape != shape:
            self._work = np.empty(shape)
        np.take(self.diff, i, axis=0, out=self._work)
        self._work *= w
        out = np.take(self.table, i, axis=0, out=out)
        out += self._work
        return out
