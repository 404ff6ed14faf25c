"""Batched solves of many small linear systems, batch axis last.

NumPy's ``linalg.solve`` pays a fixed cost per matrix, which dominates for the 3×3 to
12×12 systems of a transistor stage solved for 10⁵ variants at once. :func:`solve` runs
Gaussian elimination with partial pivoting as array operations whose innermost axis is
the batch, so every step is a pass over contiguous memory.

Layout: ``A`` is ``(n, n, S)`` and ``b`` is ``(n, k, S)`` (or ``(n, S)``), S the batch size.
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
    dtype = np.result_type(A, b)
    M = np.empty((n, n + k, S), dtype=dtype)
    M[:, :n] = A.reshape(n, n, S)
    M[:, n:] = b.reshape(n, k, S)
    if n == 1:
        x = M[0, 1:] / _nonzero(M[0, 0])
        x = x[None]
    else:
        for j in range(n):
            if j < n - 1:
                mag = np.abs(M[j:, j])
                piv = np.argmax(mag, axis=0)
                if piv.any():
                    for r in range(1, n - j):
                        sel = piv == r
                        if sel.any():
                            top = M[j, :, sel].copy()
                            M[j, :, sel] = M[j + r, :, sel]
                            M[j + r, :, sel] = top
            d = _nonzero(M[j, j])
            if j < n - 1:
                f = M[j + 1 :, j] / d
                M[j + 1 :, j:] -= f[:, None] * M[j, None, j:]
        x = np.empty((n, k, S), dtype=dtype)
        for j in range(n - 1, -1, -1):
            acc = M[j, n:].copy()
            for i in range(j + 1, n):
                acc -= M[j, i] * x[i]
            x[j] = acc / M[j, j]
    x = x.reshape((n, k) + batch)
    return x[:, 0] if vec else x


def _nonzero(d: np.ndarray) -> np.ndarray:
    if np.any(d == 0) or not np.all(np.isfinite(d)):
        raise np.linalg.LinAlgError("singular matrix")
    return d
