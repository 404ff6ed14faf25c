"""The work behind each ``stagefit`` command (argument parsing lives in :mod:`optimizer.cli`)."""

from __future__ import annotations

import sys

from .cli import EXIT_OK, EXIT_UNMET, print_json
from .errors import ConvergenceError, FileProblems, Problem, ValueSyntaxError
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


def _design_under_spec(design, spec):
    """The design placed in the spec's conditions (supply, ambient, load, sources)."""
    from dataclasses import replace

    if len(spec.inputs) != design.n_inputs:
        raise FileProblems([Problem(str(spec.path), 0, "inputs",
                                    f"the spec has {len(spec.inputs)} inputs but the design has {design.n_inputs}")])
    return replace(design, supply=spec.supply, ambient=spec.ambient, load=spec.load,
                   sources=tuple(i.source_resistance for i in spec.inputs),
                   input_names=tuple(i.name for i in spec.inputs), thd_limit=spec.targets.distortion_max,
                   level=spec.targets.required_swing() or design.level)


def cmd_check(args) -> int:
    from .analysis.evaluate import analyse, ratings
    from .analysis.targets import judge
    from .outputs.figures_json import analysis_json, analysis_text
    from .spec.designfile import load_design
    from .spec.specfile import load_spec

    design = load_design(args.design)
    spec = None
    spec_path = args.spec or (str(design.spec_path) if design.spec_path and design.spec_path.is_file() else None)
    if spec_path:
        spec = load_spec(spec_path)
        design = _design_under_spec(design, spec)
    if args.transistor:
        from .catalog.transistors import transistor_types

        types = transistor_types()
        if args.transistor not in types:
            import difflib

            close = difflib.get_close_matches(args.transistor, list(types), n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise FileProblems([Problem("command line", 0, "--transistor",
                                        f"unknown transistor type {args.transistor!r}{hint} (known: {', '.join(sorted(types))})")])
        design = design.with_model(args.transistor, types[args.transistor].model())
    try:
        an = analyse(design)
    except ConvergenceError as err:
        if not args.transistor:
            raise
        # The old values may not bias the new type at all (another polarity, say): say so, and
        # with a spec look for the values that would.
        return _substitute_only(args, design, spec, err)
    rt = ratings(an)
    targets = judge(an, spec) if spec else None
    mc = None
    if args.monte_carlo:
        from .analysis.montecarlo import monte_carlo

        mc = monte_carlo(design, an.circuit, an.conditions, args.monte_carlo, args.seed, spec, design.thd_limit)
        mc.pop("swing_samples", None)
        mc.pop("gain_samples", None)
    sub = None
    if args.transistor and spec is not None and targets is not None and not all(t.passed for t in targets):
        sub = _fewest_changes(args, spec, design)
    if args.json:
        data = analysis_json(an, rt, targets, mc)
        if sub is not None:
            data["substitute"] = _substitute_json(args, sub)
        print_json(data)
    else:
        print(analysis_text(an, rt, targets))
        if mc:
            print()
            print(f"  Monte Carlo, {mc['samples']} samples (seed {mc['seed']}):")
            for k, v in mc.get("yield", {}).items():
                if k != "large_signal_samples":
                    print(f"    {k:<18} {v * 100:6.1f} % of builds meet it")
        if targets is not None:
            bad = [t for t in targets if not t.passed]
            print()
            print("  meets every target" if not bad else f"  misses {len(bad)} target(s): " + ", ".join(t.name for t in bad))
    if targets is not None and not all(t.passed for t in targets):
        if sub is not None and not args.json:
            _print_substitute(args, sub)
        return EXIT_UNMET
    return EXIT_OK


def _fewest_changes(args, spec, design):
    from .outputs.bom import load_stock_for
    from .search.substitute import fewest_changes

    return fewest_changes(spec, design, args.transistor, load_stock_for(spec), time_limit=args.time_limit,
                          seed=args.seed, wall_limit=_wall_limit(args))


def _wall_limit(args):
    """``--wall-limit``: left out, the default (four times the time limit); 0, no bound."""
    w = getattr(args, "wall_limit", None)
    return "default" if w is None else (None if w <= 0 else w)


def _substitute_json(args, sub) -> dict:
    return {"transistor": args.transistor, "found": sub.verified is not None,
            "margin": sub.verified.margin if sub.verified is not None else None,
            "changes": [{"ref": r, "from": a, "to": b} for r, a, b in sub.changed],
            "proved": sub.proved, "note": sub.note}


def _print_substitute(args, sub) -> None:
    if sub.verified is not None:
        print(f"\n  with {args.transistor} it meets the spec again (margin {sub.verified.margin:+.3f}, verified at"
              f" every corner) when these change: " + ", ".join(f"{r} {a} → {b}" for r, a, b in sub.changed))
        print(f"  ({sub.note})")
    else:
        print(f"\n  {sub.note}")


def _substitute_only(args, design, spec, err) -> int:
    """``check --transistor`` when the old values give the new type no operating point."""
    why = f"with {args.transistor} the design as it stands has no working point the analysis can find ({err})"
    sub = _fewest_changes(args, spec, design) if spec is not None else None
    if args.json:
        data = {"transistor": args.transistor, "error": why}
        if sub is not None:
            data["substitute"] = _substitute_json(args, sub)
        print_json(data)
    else:
        print(f"  {why}")
        if sub is not None:
            _print_substitute(args, sub)
    return EXIT_UNMET


def _progress(args):
    """Progress lines on a terminal (stderr); silent when piped, with --quiet or --json."""
    if args.quiet or args.json or not sys.stderr.isatty():
        return None
    import time as _time

    t0 = _time.monotonic()

    def say(msg: str) -> None:
        print(f"  [{_time.monotonic() - t0:5.1f} s] {msg}", file=sys.stderr, flush=True)

    return say


def _spec_with_overrides(args):
    from dataclasses import replace
    from pathlib import Path

    from .spec.specfile import load_spec
    from .spec.stockfile import load_stock

    spec = load_spec(args.spec)
    stock = None
    if getattr(args, "stock", None):
        stock = load_stock(args.stock)
        parts = replace(spec.parts, stock=Path(args.stock), use=spec.parts.use if spec.parts.use != "series-only" else "stock-first")
        spec = replace(spec, parts=parts)
    se = spec.search
    se = replace(se, top=args.top or se.top) if getattr(args, "top", None) else se
    if getattr(args, "time_limit", None):
        se = replace(se, time_limit=args.time_limit)
    if getattr(args, "seed", None) is not None:
        se = replace(se, seed=args.seed)
    return replace(spec, search=se), stock


def cmd_design(args) -> int:
    from pathlib import Path

    from .outputs.results import ranked_table, result_json
    from .outputs.writer import write_outputs
    from .search.solve import search

    spec, stock = _spec_with_overrides(args)
    out_dir = Path(args.out) if args.out else Path("outputs") / spec.name
    writer = None
    if not args.no_files:
        from .outputs.files import OutputDir

        writer = OutputDir(out_dir, args.force)
        writer.check(["result.json", "design-1.yaml", "bom.csv", "report.html"])
    for w in (stock.warnings if stock else ()):
        _warn(args, f"note: {w}")
    result = search(spec, stock=stock, progress=_progress(args), wall_limit=_wall_limit(args))
    from .analysis.evaluate import ratings

    rated = {id(v): ratings(v.analysis) for v in result.designs}
    data = result_json(result, lambda v: rated[id(v)])
    if writer is not None:
        write_outputs(writer, spec, result, data, rated, progress=_progress(args))
    if args.json:
        print_json(data)
    else:
        _say(args, f"{spec.name}: {result.status}" + (f" — {len(result.designs)} design(s)" if result.designs else ""))
        if result.designs:
            print(ranked_table(result, spec))
        if not result.designs:  # with designs, the notes say why another topology could not
            for c in result.conflicts:
                print("  " + c.text)
        for n in result.notes:
            _say(args, "  " + n)
        if writer is not None and writer.written:
            names = sorted(Path(w).name for w in writer.written)
            shown = ", ".join(names[:6]) + (", …" if len(names) > 6 else "")
            _say(args, f"\nwrote {len(names)} file{'s' if len(names) != 1 else ''} to {out_dir}/ ({shown})")
        if result.designs:
            from .outputs.cautions import cautions_line

            _say(args, "\n" + cautions_line("report.html" if writer is not None else "the README"))
    return EXIT_OK if result.designs else EXIT_UNMET


def _near_miss_text(v) -> str:
    """Which targets the closest verified design missed, and by how much (for compare)."""
    from .outputs.figures_json import worst_text

    missed = sorted((t for t in v.targets if not t.passed), key=lambda t: t.margin)
    return (f"the closest design found (margin {v.margin:+.3f}) misses "
            + "; ".join(f"{t.name}: {worst_text(t)} at its worst corner, asked {t.limit}" for t in missed))


def cmd_compare(args) -> int:
    """The same spec designed at several nominal supplies, side by side."""
    import csv
    import io
    import math
    from dataclasses import replace
    from pathlib import Path

    from .outputs.results import design_entry
    from .search.solve import search
    from .spec.quantities import format_code, parse_quantity

    spec, stock = _spec_with_overrides(args)
    supplies = []
    for text in args.supply:
        try:
            v = float(text) if text.replace(".", "", 1).isdigit() else parse_quantity(text, "voltage")
        except ValueSyntaxError as err:
            raise FileProblems([Problem("command line", 0, "--supply", str(err))]) from None
        if not 1.5 <= v <= 48:
            raise FileProblems([Problem("command line", 0, "--supply", f"{text!r} is out of range (allowed: 1.5 V to 48 V)")])
        supplies.append(v)
    say = _progress(args)
    rows = []
    for v in supplies:
        sp = replace(spec, supply=spec.supply.scaled(v))
        if say:
            say(f"supply {v:g} V ({sp.supply.min:.3g}–{sp.supply.max:.3g} V)")
        r = search(sp, stock=stock, progress=say, wall_limit=_wall_limit(args))
        row = {"supply": v, "supply_min": sp.supply.min, "supply_max": sp.supply.max, "status": r.status,
               "feasible": bool(r.designs)}
        if r.designs:
            best = r.designs[0]
            an = best.analysis
            n = an.circuit.n_inputs
            row.update({
                "margin": best.margin,
                "parts": len(best.design.parts) + 1,
                "transistor": best.design.transistor,
                "values": " ".join(f"{p.ref}={format_code(p.value, 'capacitance' if p.ref.startswith('C') else 'resistance')}"
                                   for p in best.design.parts),
                "gain_db": min(an.nominal[f"gain_db:{k}"] for k in range(1, n + 1)),
                "gain_db_worst_low": min(an.low[f"gain_db:{k}"] for k in range(1, n + 1)),
                "swing": an.large_worst.get("swing"),
                "headroom_db": (20 * math.log10(an.large_worst["swing"] / sp.targets.headroom_nominal)
                                if sp.targets.headroom_nominal and an.large_worst.get("swing") else None),
                "input_impedance": min(an.low[f"input_impedance:{k}"] for k in range(1, n + 1)),
                "supply_current": an.high["supply_current"],
                "battery_hours": (sp.supply.capacity / an.high["supply_current"] / 3600) if sp.supply.capacity else None,
                "design": design_entry(1, best),
            })
        else:
            why = [c.text for c in r.conflicts] or list(r.notes)
            if not r.conflicts and r.near_misses:
                why.append(_near_miss_text(r.near_misses[0]))
            row.update({"margin": None, "why": why})
        rows.append(row)
    out_dir = Path(args.out) if args.out else Path("outputs") / f"{spec.name}-compare"
    from .outputs.files import OutputDir

    out = OutputDir(out_dir, args.force)
    out.check(["compare.csv", "compare.json", "compare.png"])
    cols = ["supply", "status", "margin", "parts", "transistor", "gain_db", "headroom_db", "swing", "input_impedance",
            "supply_current", "battery_hours", "values"]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols + ["why"])
    for row in rows:
        w.writerow([("" if row.get(c) is None else (f"{row[c]:.6g}" if isinstance(row.get(c), float) else row.get(c)))
                    for c in cols] + ["; ".join(row.get("why", []))])
    out.write("compare.csv", buf.getvalue())
    plain = [{k: v for k, v in r.items() if k != "design"} | ({"design": r["design"]} if "design" in r else {}) for r in rows]
    import json

    out.write("compare.json", json.dumps({"spec": spec.name, "supplies": plain}, indent=2, allow_nan=False) + "\n")
    try:
        from .outputs.plots import compare_plot

        out.write("compare.png", compare_plot(rows))
    except ImportError:
        pass
    if args.json:
        print_json({"spec": spec.name, "supplies": plain})
    else:
        from .outputs.text import table
        from .spec.quantities import format_si

        def cell(row, key, fmt):
            val = row.get(key)
            return "" if val is None else fmt(val)

        head = ["", *[f"{r['supply']:g} V" for r in rows]]
        lines = [
            ["status", *[r["status"] for r in rows]],
            ["margin", *[cell(r, "margin", lambda x: f"{x:+.3f}") for r in rows]],
            ["parts", *[cell(r, "parts", str) for r in rows]],
            ["transistor", *[cell(r, "transistor", str) for r in rows]],
            ["gain (nominal)", *[cell(r, "gain_db", lambda x: f"{x:+.1f} dB") for r in rows]],
            ["headroom (worst)", *[cell(r, "headroom_db", lambda x: f"{x:.1f} dB") for r in rows]],
            ["swing (worst)", *[cell(r, "swing", lambda x: format_si(x, "V") + " pk") for r in rows]],
            ["input Z (worst)", *[cell(r, "input_impedance", lambda x: format_si(x, "Ω")) for r in rows]],
            ["current (worst)", *[cell(r, "supply_current", lambda x: format_si(x, "A")) for r in rows]],
            ["battery life", *[cell(r, "battery_hours", lambda x: f"{x:.0f} h") for r in rows]],
        ]
        print(table(head, lines, "l" + "r" * len(rows)))
        for r in rows:
            if r.get("values"):
                print(f"  {r['supply']:g} V: {r['values']}")
            for why in r.get("why", []):
                print(f"  {r['supply']:g} V not met: {why}")
        _say(args, f"\nwrote compare.csv, compare.json and compare.png to {out_dir}/")
    return EXIT_OK if any(r["feasible"] for r in rows) else EXIT_UNMET
