"""The work behind each ``stagefit`` command (argument parsing lives in :mod:`optimizer.cli`)."""

from __future__ import annotations

import sys

from .cli import EXIT_OK, print_json
from .errors import FileProblems, Problem, ValueSyntaxError
from .outputs.text import table
from .spec.quantities import format_code, format_si, parse_value


def _say(args, text: str = "") -> None:
    """Print for people, unless --quiet or --json."""
    if not (getattr(args, "quiet", False) or getattr(args, "json", False)):
        print(text)


def _warn(args, text: str) -> None:
    if not getattr(args, "quiet", False):
        print(text, file=sys.stderr)


def cmd_series(args) -> int:
    from .catalog.series import get_series

    kind = "capacitance" if args.capacitance else "resistance"
    s = get_series(args.name)
    bounds = []
    for flag, text in (("--from", args.lo), ("--to", args.hi)):
        try:
            bounds.append(parse_value(text, kind).value)
        except ValueSyntaxError as err:
            raise FileProblems([Problem("command line", 0, flag, str(err))]) from None
    lo, hi = bounds
    if lo > hi:
        raise FileProblems([Problem("command line", 0, "--from", f"{args.lo} is above --to {args.hi}")])
    values = s.values_between(lo, hi)
    if args.json:
        print_json(values)
        return EXIT_OK
    unit = "F" if kind == "capacitance" else "Ω"
    _say(args, f"{s.name} (±{s.tolerance * 100:g} %), {len(values)} values from {format_si(lo, unit)} to {format_si(hi, unit)}")
    for v in values:
        print(f"{format_code(v, kind):>7}  {v:.6g}")
    return EXIT_OK


def cmd_stock(args) -> int:
    from .spec.stockfile import load_stock

    stock = load_stock(args.file)
    for w in stock.warnings:
        _warn(args, f"note: {w}")
    if args.json:
        print_json([i.to_json() for i in stock.items])
        return EXIT_OK
    rows = []
    for it in stock.items:
        if it.kind == "transistor":
            val = str(it.value)
        else:
            val = format_code(it.value, "capacitance" if it.kind == "capacitor" else "resistance")
        rating = ""
        if it.rating is not None:
            rating = format_si(it.rating, "W" if it.kind in ("resistor", "pot") else "V")
        rows.append([
            it.kind,
            val,
            it.quantity,
            f"{it.tolerance * 100:g} %" if it.tolerance else "",
            rating,
            it.type or "",
            f"{it.price:g}" if it.price is not None else "",
            " ".join(f"{h:g}" for h in it.hfe),
            it.note,
        ])
    print(table(["kind", "value", "qty", "tol", "rating", "type", "price", "hFE", "note"], rows, "llrrrllrl"))
    _say(args, f"\n{len(stock.items)} lines, {sum(i.quantity for i in stock.items)} pieces")
    return EXIT_OK


def cmd_validate(args) -> int:
    from .spec.specfile import describe, load_spec
    from .spec.stockfile import load_stock

    spec = load_spec(args.spec)
    stock = load_stock(spec.parts.stock) if spec.parts.stock else None
    if args.json:
        from .spec.serialize import spec_to_json

        print_json({"spec": spec_to_json(spec), "stock": [i.to_json() for i in stock.items] if stock else None})
        return EXIT_OK
    for line in describe(spec):
        print(line)
    if stock is not None:
        for w in stock.warnings:
            _warn(args, f"note: {w}")
        kinds = {}
        for it in stock.items:
            kinds[it.kind] = kinds.get(it.kind, 0) + it.quantity
        _say(args, "  stock holds   " + ", ".join(f"{n} {k}{'s' if n != 1 else ''}" for k, n in kinds.items()))
    _say(args, "\nspec is valid")
    return EXIT_OK
