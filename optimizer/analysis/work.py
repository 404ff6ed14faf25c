"""A count of the analysis' work, so that a search can stop at the same step on any machine.

Every batched linear solve of the analysis goes through :func:`solve` (or charges
:func:`cost`), which adds an estimate of its cost to a running total: a fixed amount per call
and per system of the batch (the vector work around each solve: stamping, device equations,
transforms) and a share per multiply-add of the factorisation and the substitutions. The
total depends only on what was computed, never on how fast the machine computed it; the
search's clock (:mod:`optimizer.search.clock`) turns it into seconds at a fixed rate.
"""

from __future__ import annotations

import numpy as np

__all__ = ["done", "solve", "charge", "cost", "tallies"]

#: Units charged per call, per system of the batch and per multiply-add of the
#: factorisation and substitutions (``n³/3 + n²k``). The three are fitted to the wall time
#: of the analysis on the development machine (full checks of the three bundled two- and
#: one-transistor stages, small-signal checks, and quick screens of 200 and 2,000 designs;
#: the fit was within 40 % of the wall time on each, 0.08 s to 5.4 s): the
#: Python and vector work around each call (building the batch, device equations,
#: transforms, judging the figures) and around each system of it cost far more than the
#: arithmetic of a small solve.
PER_CALL = 600_000
PER_SYSTEM = 1_900
PER_FLOP = 0.3

# Whole numbers, so that the count does not depend on the order of the additions.
_total = 0
_calls = 0
_systems = 0
_flops = 0


def done() -> int:
    """The work counted since the process started (units)."""
    return _total


def charge(units: int) -> None:
    """Add ``units`` of work to the count."""
    global _total
    _total += int(units)


def tallies() -> tuple[int, int, int]:
    """Calls, systems and multiply-adds counted so far (for fitting the weights)."""
    return _calls, _systems, _flops


def cost(n: int, k: int, count: int) -> int:
    """The units of one call solving ``count`` systems of ``n`` unknowns with ``k``
    right-hand sides each (counted in the tallies too)."""
    global _calls, _systems, _flops
    flops = count * (n ** 3 // 3 + n * n * k)
    _calls += 1
    _systems += count
    _flops += flops
    return PER_CALL + PER_SYSTEM * count + round(PER_FLOP * flops)


def solve(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``numpy.linalg.solve`` (batch axes first), counted."""
    n = A.shape[-1]
    count = int(np.prod(A.shape[:-2])) if A.ndim > 2 else 1
    k = b.shape[-1] if b.ndim == A.ndim else 1
    charge(cost(n, k, count))
    return np.linalg.solve(A, b)
