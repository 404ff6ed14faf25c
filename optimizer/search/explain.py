"""Why no design can meet a spec: the conflicting targets, and what each could reach.

Each target's rows in the model carry a literal; solving with those literals as assumptions
gives a set of targets that cannot all hold, which a deletion loop shrinks to a minimal one
(dropping any single target from it makes the rest feasible). For each target of that set
the model is then solved with the other targets met and this one's margin free, which gives
the nearest value it could reach. The model is a relaxation, so every such value is a bound
no design can beat ("the gain can be at most …").
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ortools.sat.python import cp_model

from ..analysis.targets import DB_PER_NEPER
from ..spec.quantities import format_si
from ..spec.specfile import Spec
from . import clock
from .candidates import Candidates
from .model import S, T_MIN, StageModel

__all__ = ["Conflict", "explain"]


@dataclass
class Conflict:
    """One target of a minimal conflicting set, and the nearest value it could reach."""

    target: str
    asked: str
    reachable: str
    margin: float  # the best margin the target could have with the others met (≤ 0)
    text: str

    def to_json(self) -> dict:
        return {"target": self.target, "asked": self.asked, "reachable": self.reachable,
                "margin": None if math.isinf(self.margin) else self.margin, "text": self.text}


def _solver(seed, seconds, one_worker=True):
    s = cp_model.CpSolver()
    s.parameters.num_workers = 1
    s.parameters.random_seed = seed
    clock.limit(s.parameters, max(seconds, 0.1))
    s.parameters.linearization_level = 0
    return s


def _feasible(spec, cands, on: set[str], seed, seconds) -> int:
    sm = StageModel(spec, cands)
    for name, lit in sm.on.items():
        sm.m.add(lit == (1 if name in on else 0))
    sm.m.add(sm.u.expr >= S)
    return clock.run(_solver(seed, seconds), sm.m)


def explain(spec: Spec, cands: Candidates, seed: int, deadline: float) -> list[Conflict]:
    """A minimal set of conflicting targets, with the nearest value of each.

    The work is shared out so the answer comes by ``deadline`` (at least a few seconds are
    always taken). A solve that runs out of time proves nothing: a target it could not
    settle stays in the set, and its nearest value is reported as not determined. When the
    set is still every target and no nearest value was found, the answer is empty: the
    caller says the conflict was not found in the time given.
    """
    budget = max(deadline - clock.now(), 3.0)
    end = clock.now() + budget
    sm = StageModel(spec, cands)
    names = list(sm.on)
    sm.m.add(sm.u.expr >= S)
    sm.m.add_assumptions(list(sm.on.values()))
    solver = _solver(seed, min(10.0, 0.3 * budget))
    st = clock.run(solver, sm.m)
    if st != cp_model.INFEASIBLE:
        core = set(names)
    else:
        idx = {lit.index: name for name, lit in sm.on.items()}
        core = {idx[i] for i in solver.sufficient_assumptions_for_infeasibility() if i in idx} or set(names)
    # Deletion loop: drop a target; if the rest is still infeasible, it was not needed.
    for name in sorted(core):
        left = end - clock.now()
        if left <= 0.5:
            break
        trial = core - {name}
        if trial and _feasible(spec, cands, trial, seed, min(5.0, 0.5 * left / max(len(core), 1))) == cp_model.INFEASIBLE:
            core = trial
    out, settled = [], False
    for k, name in enumerate(sorted(core)):
        left = end - clock.now()
        t = _nearest(spec, cands, name, seed, max(min(10.0, left / (len(core) - k)), 0.2))
        settled = settled or t is not None
        out.append(_describe(spec, name, t))
    # Every target of the spec "in conflict, not determined" says nothing: leave it out.
    return out if settled or len(core) < len(names) else []


#: Margins (nepers) at which _nearest asks whether the target can be met with the others
#: when maximising its margin did not settle it; then it bisects between the last level that
#: cannot and the first that can.
LEVELS = (0.0, -0.1, -0.2, -0.4, -0.8, -1.6, T_MIN)
#: _nearest stops bisecting when the bracket is this narrow (about 0.17 dB of headroom).
RESOLUTION = 0.02
#: The share of _nearest's time for maximising the target's margin outright.
MAXIMISE_SHARE = 0.3


def _nearest(spec, cands, name, seed, seconds) -> float | None:
    """A margin the target cannot beat with the other targets of the spec at margin ≥ 0.

    First the target's margin is maximised with the others met (a share of the time): when
    that is proved, it is the answer. Otherwise the model is asked, level by level (LEVELS,
    then bisection), whether a design meets the others with this target at margin ≥ t, and
    the lowest t proved impossible is the answer (to within RESOLUTION). The model is a
    relaxation, so no design beats either. Maximising alone can stall: on a 5 V spec asking
    30 dB of gain with 14 dB of headroom it gave up after 10 s with a bound above zero, where
    the levels proved −0.8 neper in 3 s. Returns +inf when the target can be met with the
    others (it is then in no conflict), −inf when not even the model's lowest margin can,
    None when nothing below 0 was proved in time (the conflict itself proves margin 0 out of
    reach: "the headroom can be at most 10.0 dB; asked 10 dB" says nothing).
    """
    end = clock.now() + seconds

    def model():
        sm = StageModel(spec, cands, separate=name)
        for lit in sm.on.values():
            sm.m.add(lit == 1)
        sm.m.add(sm.u.expr >= S)
        return sm

    sm = model()
    sm.m.maximize(sm.u_sep.expr)
    solver = _solver(seed, MAXIMISE_SHARE * seconds)
    st = clock.run(solver, sm.m)
    if st == cp_model.OPTIMAL:
        return math.log(max(solver.value(sm.u_sep.expr), 1) / S)
    if st == cp_model.INFEASIBLE:
        return -math.inf
    bad = good = None  # the lowest margin proved out of reach; the highest the model allows
    if st == cp_model.FEASIBLE:
        good = math.log(max(solver.value(sm.u_sep.expr), 1) / S)
        if good >= 0:
            return math.inf
        ceiling = math.log(max(solver.best_objective_bound, 1) / S)
        bad = ceiling if ceiling <= 0 else None

    def level(t):
        left = end - clock.now()
        if left < 0.05:
            return cp_model.UNKNOWN
        sm = model()
        sm.m.add(sm.u_sep.expr >= int(math.ceil(S * math.exp(t))))
        return clock.run(_solver(seed, left), sm.m)

    for t in LEVELS:
        if bad is not None and t >= bad:
            continue
        if good is not None and t <= good:
            break
        st = level(t)
        if st == cp_model.INFEASIBLE:
            bad = t
            continue
        if st in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            good = t
        break
    if bad is None:
        return math.inf if good == 0.0 else None
    if good is None and bad == T_MIN:
        return -math.inf
    while good is not None and bad - good > RESOLUTION:
        mid = 0.5 * (bad + good)
        st = level(mid)
        if st == cp_model.INFEASIBLE:
            bad = mid
        elif st in (cp_model.OPTIMAL, cp_model.FEASIBLE):
            good = mid
        else:
            break
    # Only margin 0 proved out of reach is the conflict itself, no nearer value.
    return None if bad > -RESOLUTION / 2 else bad


def _describe(spec: Spec, name: str, t: float | None) -> Conflict:
    tg = spec.targets
    if t is None:
        return Conflict(name, _asked(spec, name), "not determined", -math.inf,
                        f"{name}: in conflict with the others; how near it could come was not determined in the time given")
    if t > 0:
        return Conflict(name, _asked(spec, name), "met alone", 0.0,
                        f"{name}: can be met with the others one at a time, but not all together")
    f = math.exp(t) if math.isfinite(t) else 0.0
    never = not math.isfinite(t)
    if name == "gain" and tg.gain:
        widen = -t * DB_PER_NEPER if math.isfinite(t) else math.inf
        asked = f"{tg.gain.min:+.1f} .. {tg.gain.max:+.1f} dB"
        reach = "none" if never else f"{tg.gain.min - widen:+.1f} .. {tg.gain.max + widen:+.1f} dB"
        text = (f"the gain window would have to widen by at least {widen:.1f} dB on each side ({reach}); asked {asked}"
                if not never else f"no gain in {asked} goes with the other targets")
    elif name == "headroom":
        need = tg.required_swing()
        if tg.headroom_min is not None:
            reach_db = tg.headroom_min + t * DB_PER_NEPER if not never else -math.inf
            asked = f"{tg.headroom_min:g} dB"
            reach = f"{reach_db:.1f} dB"
            text = f"the headroom can be at most {reach}; asked {asked}"
        else:
            asked = f"{need:.3g} V peak"
            reach = f"{need * f:.3g} V peak"
            text = f"the swing can be at most {reach}; asked {asked}"
    elif name == "input impedance":
        asked = format_si(tg.input_impedance_min, "Ω")
        reach = format_si(tg.input_impedance_min * f, "Ω")
        text = f"the input impedance can be at most {reach}; asked at least {asked}"
    elif name == "output impedance":
        asked = format_si(tg.output_impedance_max, "Ω")
        reach = format_si(tg.output_impedance_max / f, "Ω") if f else "none"
        text = f"the output impedance is at least {reach}; asked at most {asked}"
    elif name == "low cutoff":
        asked = format_si(tg.low_cutoff_max, "Hz")
        reach = format_si(tg.low_cutoff_max / f, "Hz") if f else "none"
        text = f"the low cutoff can go down to {reach} at best; asked {asked}"
    elif name == "supply current":
        asked = format_si(tg.supply_current_max, "A")
        reach = format_si(tg.supply_current_max / f, "A") if f else "none"
        text = f"the stage needs at least {reach}; allowed {asked}"
    else:
        asked, reach = "active at every corner", "not possible"
        text = "no design keeps the transistor active at every corner with the other targets met"
    if never and name != "gain":
        text = f"{name}: cannot be met at all with the other targets"
    sup = spec.supply
    text = f"at {sup.min:g}–{sup.max:g} V, {text}"
    return Conflict(name, asked, reach, t, text)


def _asked(spec: Spec, name: str) -> str:
    """What the spec asks of a target, in words."""
    tg = spec.targets
    if name == "gain" and tg.gain:
        return f"{tg.gain.min:+.1f} .. {tg.gain.max:+.1f} dB"
    if name == "headroom" and tg.headroom_min is not None:
        return f"{tg.headroom_min:g} dB"
    if name == "headroom" and tg.required_swing() is not None:
        return f"{tg.required_swing():.3g} V peak"
    if name == "input impedance" and tg.input_impedance_min is not None:
        return format_si(tg.input_impedance_min, "Ω")
    if name == "output impedance" and tg.output_impedance_max is not None:
        return format_si(tg.output_impedance_max, "Ω")
    if name == "low cutoff" and tg.low_cutoff_max is not None:
        return format_si(tg.low_cutoff_max, "Hz")
    if name == "supply current" and tg.supply_current_max is not None:
        return format_si(tg.supply_current_max, "A")
    return "active at every corner" if name == "active region" else name
