"""The search's clock: seconds of work, counted the same way on every machine.

A search told to stop after S seconds stops after S seconds of *work*: the analysis' count
(:mod:`optimizer.analysis.work`, a cost per batched solve) plus the solver's deterministic
time, each turned into seconds at a fixed rate. Every decision the search takes by the clock
(when to stop a pass, how much time a topology gets, whether a verification still fits) then
depends only on what was computed, so the same spec, stock and seed give the same answer on
a faster or slower machine. (Not always on another kind of processor: the analysis' loops
run until their last point converges, which can turn on the last bits of a figure, and those
differ between processors and maths libraries; README, "Known limits".) The rates were
measured on the 2-core machine the project is developed on, set so that a second of the
analysis' work takes about a second there; the solver's unit is taken as a second, though it
ran slower there (see ``WALL_FACTOR``). A faster machine finishes sooner.

The wall clock still bounds every search (``wall_limit``, by default ``WALL_FACTOR`` times the
time limit), so a slower machine cannot run on without end; a search the wall clock stopped
first says so (:func:`cut_short`), because its answer may then differ from a faster
machine's.
``wall_limit=None`` lifts the bound (the tests do, so that their answers are the same on any
machine).
"""

from __future__ import annotations

import contextlib
import time

from ..analysis import work

__all__ = ["now", "counted", "session", "limit", "run", "cut_short", "wall_bound"]

#: Analysis work units per second of the clock (fitted with the weights of
#: :mod:`optimizer.analysis.work`: 8e8 units took about a second of wall time on the
#: development machine).
UNITS_PER_SECOND = 8.0e8
#: Seconds of the clock per unit of the solver's deterministic time (the unit is meant to be
#: about a second, and is taken as one; it ran slower here, see ``WALL_FACTOR``).
SECONDS_PER_DTIME = 1.0
#: The wall-clock bound of a search, by default, as a multiple of its time limit. On the
#: development machine the analysis' count kept within 0.7 to 1.2 s of wall time per second,
#: but the solver's deterministic unit took 1.7 s (street-duo-mixer) to 4 s (the rehearsal
#: line driver at 5 V, whose solves find nothing) of wall time; four times the limit leaves
#: the answers of the bundled specs to the count there.
WALL_FACTOR = 4.0
#: How far the clock jumps when the wall clock runs out: past every deadline, still finite.
_JUMP = 1.0e6

#: The solver's deterministic time so far, in millionths of its unit (a whole number, like
#: the analysis' count, so that sums do not depend on their order).
_solver_micro = 0
_origin = (0, 0)
_wall_end: float | None = None
_cut = False
_depth = 0


def _counted() -> float:
    # From the session's origin, in whole numbers first: the same reading at the same step
    # of two runs, whatever ran before them in the process.
    return (work.done() - _origin[0]) / UNITS_PER_SECOND + (_solver_micro - _origin[1]) * 1e-6 * SECONDS_PER_DTIME


def now() -> float:
    """Seconds of work done since the current session began (since the process started
    outside one); past every deadline once the session's wall clock has run out."""
    global _cut
    t = _counted()
    if _wall_end is not None and time.monotonic() > _wall_end:
        _cut = True
        return t + _JUMP
    return t


def counted() -> float:
    """Seconds of work done since the current session began, as :func:`now` reads them but
    without its jump once the wall clock has run out: the figure to report."""
    return _counted()


def wall_bound(time_limit: float, wall_limit: float | None | str = "default") -> float | None:
    """The wall-clock bound of a search: ``wall_limit`` when given (None: no bound), else
    ``WALL_FACTOR`` times the time limit."""
    return WALL_FACTOR * time_limit if wall_limit == "default" else wall_limit


@contextlib.contextmanager
def session(wall_limit: float | None):
    """Bound what runs inside by ``wall_limit`` seconds of wall time (None: unbounded).

    Sessions nest: an inner one (a search started by another) keeps the outer bound."""
    global _wall_end, _cut, _depth, _origin
    outer = _depth > 0
    if not outer:
        _origin = (work.done(), _solver_micro)
        _wall_end = None if wall_limit is None or wall_limit <= 0 else time.monotonic() + wall_limit
        _cut = False
    _depth += 1
    try:
        yield
    finally:
        _depth -= 1
        if not outer:
            _wall_end = None
            _origin = (0, 0)


def cut_short() -> bool:
    """Whether the wall clock of the current (or last) session ran out before its work."""
    return _cut


def limit(params, seconds: float) -> None:
    """Set a CP-SAT solver's limits: ``seconds`` of the clock as deterministic time, and the
    wall time the session has left."""
    params.max_deterministic_time = max(seconds, 0.0) / SECONDS_PER_DTIME
    if _wall_end is not None:
        params.max_time_in_seconds = max(_wall_end - time.monotonic(), 0.05)
    else:
        params.max_time_in_seconds = max(50.0 * seconds, 60.0)


def run(solver, model, callback=None):
    """``solver.solve(model, callback)``, with its deterministic time added to the clock."""
    global _solver_micro
    st = solver.solve(model, callback) if callback is not None else solver.solve(model)
    _solver_micro += round(solver.response_proto.deterministic_time * 1e6)
    return st
