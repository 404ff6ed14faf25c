"""A count of the analysis' work, so that a search can stop at the same step on any machine.

Every batched linear solve of the analysis goes through :func:`solve` (or charges
:func:`cost`), which adds an estimate of its cost to a running total: a fixed amount per call
and per system of the batch (the vector work around each solve: stamping, device equations,
transforms) and a share per multiply-add of the factorisation and the substitutions. The
total depends only on what was computed, never on how fast the machine computed it; the
search's clock (:mod:`optimizer.search.clock`) turns it into seconds at a fixed rate.

The loops that run until their last point converges (Newton for the operating point, the
clip sweep, harmonic balance and its amplitude searches) are charged a fixed amount instead
(:func:`fixed`): how many of their points are still iterating at each step can turn on the
last bits of a figure, which differ between processors and maths libraries, so counting
their solves would let the clock, and every decision taken by it, differ there.
"""

from __future__ import annotations

import contextlib

import numpy as np

__all__ = ["done", "solve", "charge", "cost", "tallies", "fixed", "FACTORS"]

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

#: The fixed charge of each loop (:func:`fixed`), in units of one solve of its whole batch:
#: about how many such solves the loop took on average, counted solve by solve, over the
#: bundled specs' searches and checks on the development machine (``benchmarks/run.py
#: work`` measures them again).
FACTORS = {
    "operating point": 9.5,
    "clip sweep": 21.0,
    "harmonic balance": 20.0,
    "swing at THD": 85.0,
    "THD at level": 29.0,
}

# Whole numbers, so that the count does not depend on the order of the additions.
_total = 0
_calls = 0
_systems = 0
_flops = 0
# Inside a fixed-charge loop: its solves are held back (and tallied, for fitting FACTORS).
_depth = 0
_held = 0
#: When a list: one (label, units held back, units of one whole-batch solve) per loop.
record: list | None = None


def done() -> int:
    """The work counted since the process started (units)."""
    return _total


def charge(units: int) -> None:
    """Add ``units`` of work to the count (held back inside :func:`fixed`)."""
    global _total, _held
    if _depth:
        _held += int(units)
    else:
        _total += int(units)


def _units(n: int, k: int, count: int) -> int:
    return PER_CALL + PER_SYSTEM * count + round(PER_FLOP * count * (n ** 3 // 3 + n * n * k))


@contextlib.contextmanager
def fixed(label: str, n: int, k: int, count: int):
    """Charge the loop run inside a fixed amount: ``FACTORS[label]`` solves of ``count``
    systems of ``n`` unknowns with ``k`` right-hand sides, however many it took. The solves
    inside are held back; a fixed loop inside another is part of the outer one's charge."""
    global _depth, _held, _total
    if _depth:
        yield
        return
    _depth, _held = 1, 0
    try:
        yield
    finally:
        _depth = 0
        base = _units(n, k, count)
        _total += round(FACTORS[label] * base)
        if record is not None:
            record.append((label, _held, base))


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
    return _units(n, k, count)


def solve(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``numpy.linalg.solve`` (batch axes first), counted."""
    n = A.shape[-1]
    count = int(np.prod(A.shape[:-2])) if A.ndim > 2 else 1
    k = b.shape[-1] if b.ndim == A.ndim else 1
    charge(cost(n, k, count))
    return np.linalg.solve(A, b)
