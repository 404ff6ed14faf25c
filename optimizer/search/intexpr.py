"""Integer expressions with known bounds, for building CP-SAT models that cannot overflow.

CP-SAT refuses a model whose expressions could overflow 64 bits, and products of wide
domains solve badly. :class:`Bounded` carries an expression with its exact range, and the
:class:`Builder` operations (``prod``, ``div``, ``scale_down``) create auxiliary variables
with the tightest domain the operands allow.
"""

from __future__ import annotations

from dataclasses import dataclass

from ortools.sat.python import cp_model

__all__ = ["Bounded", "Builder", "LIMIT"]

#: Largest magnitude any expression may reach (well inside int64).
LIMIT = 2**62


@dataclass(frozen=True)
class Bounded:
    """An integer linear expression and its range [lo, hi]."""

    expr: object
    lo: int
    hi: int

    def __add__(self, other: "Bounded | int") -> "Bounded":
        if isinstance(other, Bounded):
            return Bounded(self.expr + other.expr, self.lo + other.lo, self.hi + other.hi)
        return Bounded(self.expr + int(other), self.lo + int(other), self.hi + int(other))

    def __sub__(self, other: "Bounded | int") -> "Bounded":
        if isinstance(other, Bounded):
            return Bounded(self.expr - other.expr, self.lo - other.hi, self.hi - other.lo)
        return Bounded(self.expr - int(other), self.lo - int(other), self.hi - int(other))

    def times(self, k: int) -> "Bounded":
        k = int(k)
        a, b = self.lo * k, self.hi * k
        return Bounded(self.expr * k, min(a, b), max(a, b))


class Builder:
    """Creates named variables for a model, keeping every domain tight and in range."""

    def __init__(self, model: cp_model.CpModel):
        self.m = model
        self._n = 0

    def name(self, base: str) -> str:
        self._n += 1
        return f"{base}#{self._n}"

    def const(self, k: int) -> Bounded:
        return Bounded(int(k), int(k), int(k))

    def var(self, lo: int, hi: int, base: str) -> Bounded:
        lo, hi = int(lo), int(hi)
        if hi < lo:
            hi = lo
        if max(abs(lo), abs(hi)) > LIMIT:
            raise OverflowError(f"{base}: domain [{lo}, {hi}] is too wide")
        return Bounded(self.m.new_int_var(lo, hi, self.name(base)), lo, hi)

    def fix(self, b: Bounded, base: str) -> Bounded:
        """A variable equal to the expression (needed where CP-SAT wants a variable)."""
        if isinstance(b.expr, cp_model.IntVar):
            return b
        v = self.var(b.lo, b.hi, base)
        self.m.add(v.expr == b.expr)
        return v

    def onehot(self, bools, values) -> Bounded:
        """Σ values[i]·bools[i] for a one-hot group."""
        vals = [int(v) for v in values]
        expr = sum(v * b for v, b in zip(vals, bools) if v != 0)
        return Bounded(expr, min(vals), max(vals))

    def prod(self, a: Bounded, b: Bounded, base: str) -> Bounded:
        """a·b exactly (both operands must be non-negative)."""
        if a.lo < 0 or b.lo < 0:
            raise ValueError(f"{base}: products take non-negative operands")
        lo, hi = a.lo * b.lo, a.hi * b.hi
        v = self.var(lo, hi, base)
        self.m.add_multiplication_equality(v.expr, [self.fix(a, base + ".a").expr, self.fix(b, base + ".b").expr])
        return v

    def div(self, num: Bounded, den: Bounded, base: str, hi: int | None = None) -> Bounded:
        """floor(num/den) for num ≥ 0 and den ≥ 1.

        ``hi`` is an upper bound the caller knows from the mathematics (e.g. R2/(R1+R2) ≤ 1)
        that is tighter than the operands' ranges give.
        """
        if den.lo < 1 or num.lo < 0:
            raise ValueError(f"{base}: division needs num ≥ 0 and den ≥ 1 (got [{num.lo},{num.hi}] / [{den.lo},{den.hi}])")
        top = num.hi // den.lo if hi is None else min(num.hi // den.lo, int(hi))
        v = self.var(num.lo // den.hi, top, base)
        self.m.add_division_equality(v.expr, self.fix(num, base + ".n").expr, self.fix(den, base + ".d").expr)
        return v

    def scale_down(self, a: Bounded, k: int, up: bool, base: str) -> Bounded:
        """ceil(a/k) when ``up`` else floor(a/k), for a ≥ 0 (as a bracketed variable)."""
        k = int(k)
        v = self.var(a.lo // k, -(-a.hi // k), base)
        if up:
            self.m.add(k * v.expr >= a.expr)
            self.m.add(k * v.expr <= a.expr + k - 1)
        else:
            self.m.add(k * v.expr <= a.expr)
            self.m.add(k * v.expr >= a.expr - k + 1)
        return v
