"""Batched solves of many small linear systems, batch axis last.

The analysis keeps the batch axis last (``(n, n, B)`` matrices), which makes stamping a
netlist a few vector operations; LAPACK wants it first. :func:`solve` moves the axis and
hands the whole batch to ``numpy.linalg.solve`` in one call (measured faster than
vectorised elimination for every size the stages produce, 3×3 to 53×53).
"""

from __future__ import annotations

import numpy as np

__all__ = ["solve"]


def solve(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve ``A[:, :, s] x[:, :, s] = b[:, :, s]`` for every s.

    Parameters
    ----------
    A
        ``(n, n, *batch)`` matrices.
    b
        ``(n, k, *batch)`` or ``(n, *batch)`` right-hand sides.

    Returns
    -------
    numpy.ndarray
        The solutions, shaped like ``b``.

    Raises
    ------
    numpy.linalg.LinAlgError
        When a matrix of the batch is singular.
    """
    n = A.shape[0]
    batch = A.shape[2:]
    vec = b.ndim == A.ndim - 1
    if vec:
        b = b[:, None]
    k = b.shape[1]
    S = int(np.prod(batch)) if batch else 1
    Ab = np.moveaxis(A.reshape(n, n, S), 2, 0)
    bb = np.moveaxis(b.reshape(n, k, S), 2, 0)
    x = np.linalg.solve(Ab, bb)
    if not np.all(np.isfinite(x)):
        raise np.linalg.LinAlgError("singular matrix")
    x = np.moveaxis(x, 0, 2).reshape((n, k) + batch)
    return x[:, 0] if vec else x
