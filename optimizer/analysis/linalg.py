"""Batched solves of many small linear systems, batch axis last.

The analysis keeps the batch axis last (``(n, n, B)`` matrices), which makes stamping a
netlist a few vector operations; LAPACK wants it first. :func:`solve` moves the axis and
hands the whole batch to ``numpy.linalg.solve`` in one call (measured faster than
vectorised elimination for every size the stages produce from 4×4 to 53×53). Systems of
one to three unknowns (the DC Newton system of a one-transistor stage is 3×3) are solved
by Cramer's rule on whole arrays instead: LAPACK's cost per matrix is then mostly call
overhead, and the formulas were measured 20 times faster on 20,000 3×3 systems.
"""

from __future__ import annotations

import numpy as np

from . import work

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
    if n <= 3:
        work.charge(work.cost(n, k, S))
        x = _cramer(A, b)
        return x[:, 0] if vec else x
    Ab = np.moveaxis(A.reshape(n, n, S), 2, 0)
    bb = np.moveaxis(b.reshape(n, k, S), 2, 0)
    x = work.solve(Ab, bb)
    if not np.all(np.isfinite(x)):
        raise np.linalg.LinAlgError("singular matrix")
    x = np.moveaxis(x, 0, 2).reshape((n, k) + batch)
    return x[:, 0] if vec else x


def _cramer(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Cramer's rule for n ≤ 3, batch axes last; b is (n, k, *batch)."""
    n = A.shape[0]
    if n == 1:
        det = A[0, 0]
        inv = [[np.ones_like(det)]]
    elif n == 2:
        det = A[0, 0] * A[1, 1] - A[0, 1] * A[1, 0]
        inv = [[A[1, 1], -A[0, 1]], [-A[1, 0], A[0, 0]]]
    else:
        c00 = A[1, 1] * A[2, 2] - A[1, 2] * A[2, 1]
        c01 = A[1, 2] * A[2, 0] - A[1, 0] * A[2, 2]
        c02 = A[1, 0] * A[2, 1] - A[1, 1] * A[2, 0]
        det = A[0, 0] * c00 + A[0, 1] * c01 + A[0, 2] * c02
        inv = [[c00, A[0, 2] * A[2, 1] - A[0, 1] * A[2, 2], A[0, 1] * A[1, 2] - A[0, 2] * A[1, 1]],
               [c01, A[0, 0] * A[2, 2] - A[0, 2] * A[2, 0], A[0, 2] * A[1, 0] - A[0, 0] * A[1, 2]],
               [c02, A[0, 1] * A[2, 0] - A[0, 0] * A[2, 1], A[0, 0] * A[1, 1] - A[0, 1] * A[1, 0]]]
    if not np.all(np.isfinite(det)) or np.any(det == 0):
        raise np.linalg.LinAlgError("singular matrix")
    x = np.stack([sum(inv[i][j][None] * b[j] for j in range(n)) for i in range(n)]) / det[None, None]
    if not np.all(np.isfinite(x)):
        raise np.linalg.LinAlgError("singular matrix")
    return x
