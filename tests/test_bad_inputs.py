"""Every bad input gives one clear message and exit code 2, never a traceback.

Each case starts from a valid file, breaks one thing, runs the command line
(``validate``, ``stock`` or ``check``) and checks the problem line on stderr::

    stagefit validate: 1 problem:
      /tmp/.../spec.yaml:26: targets.low_cutoff.max: '20 V' is not a valid frequency: ...

The line must name this file, the expected line number and field path, and contain every
expected fragment (the bad value and what is allowed, or a hint).
"""

from __future__ import annotations

import json
import pickle
import re
from pathlib import Path

import pytest

from optimizer.cli import main
from optimizer.errors import CircuitError, ConvergenceError, FileProblems, Problem, ValueSyntaxError

ROOT = Path(__file__).resolve().parents[1]

# ---------------------------------------------------------------------------------------
# Helpers

_PROBLEM = re.compile(r"^  (?P<file>.+?):(?P<line>\d+): (?P<rest>.*)$")
_NO_LINE = re.compile(r"^  (?P<file>\S+?): (?P<rest>.*)$")


def _run(capsys, command: str, path: Path) -> tuple[int, str, str]:
    capsys.readouterr()
    code = main([command, str(path)])
    out, err = capsys.readouterr()
    assert "Traceback" not in out + err
    assert "internal error" not in err
    return code, out, err


def _problems(err: str) -> list[tuple[Path, int, str]]:
    """(file, line, 'field: message') of each problem line on stderr."""
    found = []
    for ln in err.splitlines():
        m = _PROBLEM.match(ln)
        if m:
            found.append((Path(m["file"]), int(m["line"]), m["rest"]))
            continue
        m = _NO_LINE.match(ln)
        if m:
            found.append((Path(m["file"]), 0, m["rest"]))
    return found


def _expect_problem(
    capsys, command: str, path: Path, line: int, field: str | None, fragments: list[str], count: int | None = None,
    where: Path | None = None,
) -> str:
    """Run ``command path``; assert exit code 2 and a problem at file:line: field: with fragments.

    ``where`` is the file the problem is in when it is not ``path`` (a stock list a spec names).
    """
    code, _, err = _run(capsys, command, path)
    where = where or path
    assert code == 2, err
    assert err.startswith(f"stagefit {command}: "), err
    assert re.search(r"stagefit \w+: \d+ problems?:", err), err
    problems = _problems(err)
    assert problems, err
    if count is not None:
        assert len(problems) == count, err
    hits = []
    for file, ln, rest in problems:
        if file.resolve() != where.resolve() or ln != line:
            continue
        if field:
            if not rest.startswith(f"{field}: "):
                continue
            rest = rest[len(field) + 2:]
        hits.append(rest)
    assert hits, f"no problem at {where.name}:{line} field {field!r} in:\n{err}"
    assert any(all(f in h for f in fragments) for h in hits), f"fragments {fragments} not in:\n{err}"
    return err


def _edit(base: str, *pairs: tuple[str, str]) -> str:
    text = base
    for old, new in pairs:
        assert text.count(old) == 1, f"{old!r} is not unique in the base text"
        text = text.replace(old, new)
    return text


# ---------------------------------------------------------------------------------------
# Specs
#
# Line numbers of BASE_SPEC: name 1, supply 3-6 (nominal 4, min 5, max 6), ambient 7-9,
# load 10-11, inputs 12-17 (second input 16), targets 18, gain 19-21, headroom 22-24,
# low_cutoff 25-26, high_cutoff 27-28, distortion 29-30, parts 31, resistors 32-36
# (series 33, tolerance 34, min 35, max 36), capacitors 37-38, transistors 39, search 40-41.

BASE_SPEC = """\
name: t
description: test stage
supply:
  nominal: 9 V
  min: 7 V
  max: 9.6 V
ambient:
  min: 5 °C
  max: 35 °C
load:
  resistance: 10k
inputs:
  - name: phone
    source_resistance: 100
    max_level: 0.4 V
  - name: keys
    source_resistance: 1k
targets:
  gain:
    value: 0 dB
    tolerance: 2 dB
  headroom:
    nominal: -10 dBV
    min: 9 dB
  low_cutoff:
    max: 30 Hz
  high_cutoff:
    min: 20 kHz
  distortion:
    max: 1 %
parts:
  resistors:
    series: E12
    tolerance: 5 %
    min: 100
    max: 1M
  capacitors:
    series: E6
  transistors: [2N3904]
search:
  top: 3
"""

SUPPLY = "supply:\n  nominal: 9 V\n  min: 7 V\n  max: 9.6 V\n"
INPUTS = "inputs:\n  - name: phone\n    source_resistance: 100\n    max_level: 0.4 V\n  - name: keys\n    source_resistance: 1k\n"
GAIN = "  gain:\n    value: 0 dB\n    tolerance: 2 dB\n"
HEADROOM = "  headroom:\n    nominal: -10 dBV\n    min: 9 dB\n"
TRANSISTORS = "  transistors: [2N3904]\n"


def S(*pairs: tuple[str, str]) -> str:
    return _edit(BASE_SPEC, *pairs)


SPEC_CASES = [
    # unknown keys, with a suggestion and the allowed ones
    ("unknown-top-key", S(("targets:\n", "targts:\n")), 18, "targts",
     ["unknown field", "did you mean 'targets'?", "allowed here: name, description, supply, ambient, load, inputs, targets"]),
    ("unknown-top-key-ambiant", S(("ambient:\n", "ambiant:\n")), 7, "ambiant", ["unknown field", "did you mean 'ambient'?"]),
    ("unknown-nested-key", S(("    tolerance: 2 dB", "    tolerence: 2 dB")), 21, "targets.gain.tolerence",
     ["unknown field", "did you mean 'tolerance'?", "allowed here: value, tolerance, min, max"]),
    ("unknown-parts-key", S((TRANSISTORS, "  transistor: [2N3904]\n")), 39, "parts.transistor",
     ["unknown field", "did you mean 'transistors'?", "resistors, capacitors, pots, transistors, stock, use"]),
    ("unknown-input-key", S(("    max_level: 0.4 V", "    max_levl: 0.4 V")), 15, "inputs[1].max_levl",
     ["unknown field", "did you mean 'max_level'?"]),
    # missing required fields
    ("missing-name", S(("name: t\n", "")), 1, "name", ["is missing"]),
    ("missing-supply", S((SUPPLY, "")), 1, "supply", ["is missing"]),
    ("missing-load", S(("load:\n  resistance: 10k\n", "")), 1, "load", ["is missing"]),
    ("missing-inputs", S((INPUTS, "")), 1, "inputs", ["is missing"]),
    ("missing-source-resistance", S(("    source_resistance: 1k\n", "")), 16, "inputs[2].source_resistance", ["is missing"]),
    ("missing-headroom-min", S(("    min: 9 dB\n", "")), 23, "targets.headroom.min", ["is missing"]),
    ("gain-value-without-tolerance", S(("    tolerance: 2 dB\n", "")), 20, "targets.gain.tolerance",
     ["is missing", "give value and tolerance, or min and max"]),
    # wrong types
    ("inputs-as-number", S((INPUTS, "inputs: 3\n")), 12, "inputs",
     ["got a number: 3", "a list of inputs or {count: N, source_resistance: R}"]),
    ("gain-as-string", S((GAIN, "  gain: loud\n")), 19, "targets.gain",
     ["got text: 'loud'", "a mapping with the fields value, tolerance, min, max"]),
    ("resistors-as-list", S(("  resistors:\n    series: E12\n    tolerance: 5 %\n    min: 100\n    max: 1M\n",
                             "  resistors: [E12]\n")), 32, "parts.resistors",
     ["got a list: ['E12']", "series, tolerance, min, max"]),
    ("name-as-number", S(("name: t\n", "name: 12\n")), 1, "name", ["must be text", "got a number: 12"]),
    ("name-with-space", S(("name: t\n", "name: my spec\n")), 1, "name", ["'my spec'", "letters, digits, '.', '_' or '-'"]),
    ("level-control-not-bool", S(("    max_level: 0.4 V", "    level_control: yes please")), 15, "inputs[1].level_control",
     ["must be true or false", "'yes please'"]),
    # missing or wrong units
    ("supply-without-unit", S((SUPPLY, "supply: 9\n")), 3, "supply",
     ["9 is not a valid voltage", "the unit is missing", "9 V"]),
    ("nominal-without-unit", S(("  nominal: 9 V", "  nominal: 9")), 4, "supply.nominal",
     ["9 is not a valid voltage", "the unit is missing", "write e.g. 9 V"]),
    ("gain-without-unit", S(("    value: 0 dB", "    value: 6")), 20, "targets.gain.value",
     ["6 is not a valid decibel", "the unit is missing", "6 dB"]),
    ("low-cutoff-in-volts", S(("    max: 30 Hz", "    max: 20 V")), 26, "targets.low_cutoff.max",
     ["'20 V' is not a valid frequency", "the unit 'V' is not 'Hz'", "20 Hz"]),
    ("supply-in-words", S((SUPPLY, "supply: nine volts\n")), 3, "supply", ["'nine volts' is not a valid voltage", "9 V"]),
    ("temperature-without-unit", S(("  min: 5 °C", "  min: 5")), 8, "ambient.min",
     ["5 is not a valid temperature", "the unit is missing", "write 5 °C"]),
    ("percent-without-sign", S(("    max: 1 %", "    max: 1")), 30, "targets.distortion.max",
     ["1 is not a valid percent", "the % sign is missing", "write 1 %"]),
    ("tolerance-without-sign", S(("    tolerance: 5 %", "    tolerance: 5")), 34, "parts.resistors.tolerance",
     ["5 is not a valid percent", "the % sign is missing", "write 5 %"]),
    ("time-limit-without-unit", S(("  top: 3\n", "  top: 3\n  time_limit: 30\n")), 42, "search.time_limit",
     ["30 is not a valid time", "the unit is missing", "30 s"]),
    ("battery-capacity-without-unit", S(("  max: 9.6 V\n", "  max: 9.6 V\n  capacity: 500\n")), 7, "supply.capacity",
     ["500 is not a valid charge", "the unit is missing", "500 mAh"]),
    ("level-dbv-lower-case", S(("-10 dBV", "-10 dbv")), 23, "targets.headroom.nominal",
     ["'-10 dbv' is not a valid level", "levels are written dBV or dBu", "-10 dBV"]),
    # out of range
    ("supply-100-V", S(("  max: 9.6 V", "  max: 100 V")), 6, "supply.max", ["'100 V' is out of range", "allowed: 1.5 V to 48 V"]),
    ("inputs-count-17", S((INPUTS, "inputs: {count: 17, source_resistance: 1k}\n")), 12, "inputs.count",
     ["17 is out of range", "from 1 to 16"]),
    ("inputs-list-17", S((INPUTS, "inputs: [" + ", ".join(["{source_resistance: 1k}"] * 17) + "]\n")), 12, "inputs",
     ["has 17 inputs", "allowed: 1 to 16"]),
    ("gain-90-dB", S(("    value: 0 dB", "    value: 90 dB")), 20, "targets.gain.value",
     ["'90 dB' is out of range", "allowed: -40 dB to 60 dB"]),
    ("ambient-200-C", S(("  max: 35 °C", "  max: 200 °C")), 9, "ambient.max", ["'200 °C' is out of range", "-40 °C to 85 °C"]),
    ("load-capacitance-1u", S(("  resistance: 10k\n", "  resistance: 10k\n  capacitance: 1u\n")), 12, "load.capacitance",
     ["'1u' is out of range", "0 F to 100 nF"]),
    ("search-top-99", S(("  top: 3", "  top: 99")), 41, "search.top", ["99 is out of range", "from 1 to 50"]),
    # min above max, nominal outside
    ("supply-min-above-max", S(("  min: 7 V", "  min: 10 V"), ("  max: 9.6 V", "  max: 8 V")), 5, "supply.min",
     ["min 10 V is above max 8 V"]),
    ("resistors-min-above-max", S(("    min: 100\n", "    min: 1M\n"), ("    max: 1M\n", "    max: 100\n")), 35,
     "parts.resistors.min", ["min 1 MΩ is above max 100 Ω"]),
    ("capacitors-min-above-max", S(("    series: E6\n", "    series: E6\n    min: 1u\n    max: 1n\n")), 39,
     "parts.capacitors.min", ["min 1 µF is above max 1 nF"]),
    ("gain-min-above-max", S(("    value: 0 dB", "    min: 6 dB"), ("    tolerance: 2 dB", "    max: 0 dB")), 20,
     "targets.gain.min", ["min 6 dB is above max 0 dB"]),
    ("ambient-min-above-max", S(("  min: 5 °C", "  min: 40 °C"), ("  max: 35 °C", "  max: 5 °C")), 8, "ambient.min",
     ["min 40 °C is above max 5 °C"]),
    ("supply-nominal-outside", S(("  nominal: 9 V", "  nominal: 12 V")), 4, "supply.nominal",
     ["nominal 12 V is outside min 7 V .. max 9.6 V"]),
    ("ambient-nominal-outside", S(("  max: 35 °C\n", "  max: 35 °C\n  nominal: 50 °C\n")), 10, "ambient.nominal",
     ["nominal 50 °C is outside 5 °C .. 35 °C"]),
    ("low-cutoff-above-high-cutoff", S(("    max: 30 Hz", "    max: 30 kHz")), 26, "targets.low_cutoff",
     ["low_cutoff 30 kHz is not below high_cutoff 20 kHz"]),
    # names the loader must know
    ("unknown-series-E25", S(("    series: E12", "    series: E25")), 33, "parts.resistors.series",
     ["'E25' is not allowed", "did you mean 'E24'?", "allowed: E3, E6, E12, E24, E48, E96, E192"]),
    ("unknown-transistor", S(("[2N3904]", "[2N3094]")), 39, "parts.transistors[1]",
     ["unknown transistor type '2N3094'", "did you mean '2N3904'?", "known: ", "BC549C"]),
    ("unknown-topology", S(("search:\n", "topology: divider-cc\nsearch:\n")), 40, "topology",
     ["'divider-cc' is not allowed", "did you mean 'divider-ce'?", "allowed: divider-ce"]),
    ("unknown-use", S((TRANSISTORS, TRANSISTORS + "  use: stock-onyl\n")), 40, "parts.use",
     ["'stock-onyl' is not allowed", "did you mean 'stock-only'?", "stock-only, stock-first, series-only"]),
    ("missing-stock-file", S((TRANSISTORS, TRANSISTORS + "  stock: drawer.csv\n")), 40, "parts.stock",
     ["'drawer.csv': no such stock file", "looked for"]),
    ("stock-only-without-stock", S((TRANSISTORS, TRANSISTORS + "  use: stock-only\n")), 40, "parts.use",
     ["'stock-only' needs a stock file (parts.stock)"]),
    # values that could be read two ways
    ("resistance-4m7", S(("    min: 100\n", "    min: 4m7\n")), 35, "parts.resistors.min",
     ["'4m7' is not a valid resistance", "milli or mega", "2M2"]),
    ("capacitance-100", S(("    series: E6\n", "    series: E6\n    min: 100\n")), 39, "parts.capacitors.min",
     ["100 is not a valid capacitance", "could be pF, nF or µF", "100n"]),
    ("resistance-4.7k7", S(("    min: 100\n", "    min: 4.7k7\n")), 35, "parts.resistors.min",
     ["'4.7k7' is not a valid resistance", "two decimal markers", "4.7k or 4K7"]),
    ("resistance-4,7k", S(("    min: 100\n", "    min: 4,7k\n")), 35, "parts.resistors.min",
     ["'4,7k' is not a valid resistance", "comma is not a decimal marker", "4K7"]),
    ("source-resistance-1x", S(("    source_resistance: 100", "    source_resistance: 1x")), 14,
     "inputs[1].source_resistance", ["'1x' is not a valid resistance", "4K7, 470R, 4.7k"]),
    # structure
    ("duplicate-key", S(("  max: 9.6 V\n", "  max: 9.6 V\n  min: 6 V\n")), 7, "supply.min",
     ["is given twice", "first on line 5"]),
    ("input-names-equal", S(("  - name: keys", "  - name: phone")), 16, "inputs[2].name",
     ["'phone' is used by another input", "names must differ"]),
    ("snr-without-headroom-nominal", S((HEADROOM, "  snr: {min: 80 dB}\n")), 22, "targets.snr",
     ["needs headroom.nominal", "nominal level"]),
    ("yaml-syntax", S(("  resistance: 10k", "  resistance: 10k: x")), 11, None,
     ["YAML syntax", "mapping values are not allowed here"]),
    ("yaml-unclosed-bracket", S(("  resistance: 10k", "  resistance: [10k")), 12, None,
     ["YAML syntax", "expected ',' or ']'", "flow sequence that starts on line 11"]),
    ("empty-file", "", 1, None, ["the file is empty"]),
    ("only-comments", "# a spec, some day\n", 1, None, ["the file is empty"]),
    ("top-level-list", "- name: t\n- supply: 9 V\n", 1, None,
     ["must be a mapping with the fields name, description, supply", "got a list"]),
]


@pytest.mark.parametrize(("text", "line", "field", "fragments"), [c[1:] for c in SPEC_CASES], ids=[c[0] for c in SPEC_CASES])
def test_bad_spec(tmp_path, capsys, text, line, field, fragments):
    path = tmp_path / "spec.yaml"
    path.write_text(text, encoding="utf-8")
    _expect_problem(capsys, "validate", path, line, field, fragments)


def test_there_are_enough_spec_cases():
    assert len(SPEC_CASES) >= 30
    assert len({c[0] for c in SPEC_CASES}) == len(SPEC_CASES)


def test_the_base_spec_is_valid(tmp_path, capsys):
    path = tmp_path / "spec.yaml"
    path.write_text(BASE_SPEC, encoding="utf-8")
    code, out, err = _run(capsys, "validate", path)
    assert code == 0, err
    assert "spec is valid" in out


def test_the_bundled_spec_is_valid(capsys, monkeypatch):
    monkeypatch.chdir(ROOT)
    code, out, err = _run(capsys, "validate", Path("specs/street-duo-mixer.yaml"))
    assert code == 0, err
    assert "battery 500 mAh" in out and "spec is valid" in out


def test_three_problems_in_one_spec_are_reported_at_once(tmp_path, capsys):
    path = tmp_path / "spec.yaml"
    path.write_text(S(("ambient:\n", "ambiant:\n"), ("  nominal: 9 V", "  nominal: 9"), ("[2N3904]", "[2N3094]")), encoding="utf-8")
    err = _expect_problem(capsys, "validate", path, 7, "ambiant", ["did you mean 'ambient'?"], count=3)
    assert "3 problems:" in err
    for line, field, fragment in [
        (4, "supply.nominal", "9 is not a valid voltage: the unit is missing"),
        (39, "parts.transistors[1]", "did you mean '2N3904'?"),
    ]:
        _expect_problem(capsys, "validate", path, line, field, [fragment], count=3)


def test_bad_rows_in_the_stock_a_spec_names_are_reported(tmp_path, capsys):
    stock = tmp_path / "drawer.csv"
    stock.write_text("kind,value,quantity\nresistor,1k,5\nresistor,2k2,none\n", encoding="utf-8")
    path = tmp_path / "spec.yaml"
    path.write_text(S((TRANSISTORS, TRANSISTORS + "  stock: drawer.csv\n")), encoding="utf-8")
    _expect_problem(capsys, "validate", path, 3, "quantity", ["'none' must be a whole number of pieces, 1 or more"],
                    count=1, where=stock)


def test_a_spec_with_stock_duplicates_validates_with_a_note(tmp_path, capsys):
    stock = tmp_path / "drawer.csv"
    stock.write_text("kind,value,quantity\nresistor,1k,5\nresistor,1K,3\n", encoding="utf-8")
    path = tmp_path / "spec.yaml"
    path.write_text(S((TRANSISTORS, TRANSISTORS + "  stock: drawer.csv\n")), encoding="utf-8")
    code, out, err = _run(capsys, "validate", path)
    assert code == 0, err
    assert "note: line 3: same part as line 2 (resistor 1K); merged, 5 + 3 = 8 pieces" in err
    assert "8 resistors" in out


# ---------------------------------------------------------------------------------------
# Stock lists

HEADER = "kind,value,quantity,tolerance,rating,type,price,note,hfe\n"


def _row(kind="resistor", value="1k", quantity="5", tolerance="", rating="", type_="", price="", note="", hfe=""):
    return ",".join([kind, value, quantity, tolerance, rating, type_, price, note, hfe]) + "\n"


STOCK_CASES = [
    # (id, file name, text, line, field, fragments)
    ("unknown-column", "s.csv", "kind,value,quantity,tolerence\nresistor,1k,5,5 %\n", 1, "header",
     ["unknown column 'tolerence'", "did you mean 'tolerance'?", "allowed: kind, value, quantity, tolerance"]),
    ("missing-column", "s.csv", "kind,value,tolerance\nresistor,1k,5 %\n", 1, "header",
     ["the 'quantity' column is missing", "required: kind, value, quantity"]),
    ("bad-kind", "s.csv", HEADER + _row(kind="resistr"), 2, "kind",
     ["'resistr' is not a kind of part", "did you mean 'resistor'?", "allowed: resistor, capacitor, pot, transistor"]),
    ("bad-value", "s.csv", HEADER + _row(value="4m7"), 2, "value",
     ["'4m7' is not a valid resistance", "milli or mega"]),
    ("capacitance-without-unit", "s.csv", HEADER + _row(kind="capacitor", value="100"), 2, "value",
     ["'100' is not a valid capacitance", "could be pF, nF or µF", "100n"]),
    ("empty-value", "s.csv", HEADER + _row(value=""), 2, "value", ["is empty"]),
    ("quantity-0", "s.csv", HEADER + _row(quantity="0"), 2, "quantity", ["'0' must be a whole number of pieces, 1 or more"]),
    ("quantity-x", "s.csv", HEADER + _row(quantity="x"), 2, "quantity", ["'x' must be a whole number of pieces, 1 or more"]),
    ("quantity-2.5", "s.csv", HEADER + _row(quantity="2.5"), 2, "quantity", ["'2.5' must be a whole number of pieces"]),
    ("resistor-rating-in-volts", "s.csv", HEADER + _row(rating="1/4 V"), 2, "rating",
     ["'1/4 V' is not a valid power", "the unit 'V' is not 'W'", "1/4 W"]),
    ("capacitor-rating-in-watts", "s.csv", HEADER + _row(kind="capacitor", value="10u", rating="25 W"), 2, "rating",
     ["'25 W' is not a valid voltage", "the unit 'W' is not 'V'", "9 V"]),
    ("tolerance-without-sign", "s.csv", HEADER + _row(tolerance="5"), 2, "tolerance",
     ["'5' is not a valid percent", "the % sign is missing", "write 5 %"]),
    ("bad-type", "s.csv", HEADER + _row(kind="capacitor", value="10u", type_="electrolitic"), 2, "type",
     ["'electrolitic' is not a capacitor type", "did you mean 'electrolytic'?", "ceramic, film, electrolytic"]),
    ("unknown-transistor", "s.csv", HEADER + _row(kind="transistor", value="2N3094"), 2, "value",
     ["unknown transistor type '2N3094'", "did you mean '2N3904'?", "catalog/transistors.yaml"]),
    ("hfe-on-a-resistor", "s.csv", HEADER + _row(hfe="200"), 2, "hfe",
     ["'200'", "measured hFE applies to transistors only", "this row is a resistor"]),
    ("hfe-in-a-resistor-note", "s.csv", HEADER + _row(note="hFE 200"), 2, "hfe",
     ["measured hFE applies to transistors only"]),
    ("price-with-currency", "s.csv", HEADER + _row(price="$1"), 2, "price",
     ["'$1' must be a number", "no currency sign"]),
    ("more-hfe-than-pieces", "s.csv", HEADER + _row(kind="transistor", value="2N3904", quantity="2", hfe="200 210 220"), 2,
     "hfe", ["3 measurements for 2 pieces"]),
    ("hfe-implausible", "s.csv", HEADER + _row(kind="transistor", value="2N3904", quantity="2", hfe="200 9000"), 2,
     "hfe", ["'200 9000'", "between 5 and 5000"]),
    ("too-many-cells", "s.csv", HEADER + "resistor,4,7k,5,,,,,,,\n", 2, None,
     ["has 11 cells but the header has 9", "quote it"]),
    ("comment-lines-keep-line-numbers", "s.csv", "# drawer\n# kind,value,...\n" + HEADER + "\n" + _row() + _row(quantity="-1"),
     6, "quantity", ["'-1' must be a whole number of pieces"]),
    ("empty-file", "s.csv", "", 1, None, ["the stock file is empty", "kind,value,quantity"]),
    ("yaml-unknown-field", "s.yaml", "- {kind: resistor, value: 1k, quantity: 5, tolerence: 5 %}\n", 1, "[1].tolerence",
     ["unknown field", "did you mean 'tolerance'?"]),
    ("yaml-field-on-its-own-line", "s.yaml", "items:\n  - kind: resistor\n    value: 1k\n    quantity: 2.5\n", 4, "quantity",
     ["'2.5' must be a whole number of pieces"]),
    ("yaml-missing-quantity", "s.yaml", "- {kind: resistor, value: 1k}\n", 1, "[1].quantity", ["is missing"]),
    ("yaml-not-a-list", "s.yaml", "kind: resistor\n", 1, None, ["must be a list of parts (or a mapping with items:)"]),
]


@pytest.mark.parametrize(("name", "text", "line", "field", "fragments"), [c[1:] for c in STOCK_CASES],
                         ids=[c[0] for c in STOCK_CASES])
def test_bad_stock(tmp_path, capsys, name, text, line, field, fragments):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    _expect_problem(capsys, "stock", path, line, field, fragments, count=1)


def test_there_are_enough_stock_cases():
    assert len(STOCK_CASES) >= 10
    assert len({c[0] for c in STOCK_CASES}) == len(STOCK_CASES)


@pytest.mark.parametrize("name", ["nothere.csv", "nothere.yaml"])
def test_missing_stock_file(tmp_path, capsys, name):
    path = tmp_path / name
    _expect_problem(capsys, "stock", path, 0, None, ["does not exist"], count=1)


def test_every_bad_row_is_reported_with_its_line(tmp_path, capsys):
    path = tmp_path / "s.csv"
    path.write_text(
        HEADER
        + _row()  # 2: good
        + _row(kind="resistr")  # 3
        + _row(quantity="0")  # 4
        + _row(kind="capacitor", value="100")  # 5
        + _row(value="2k2", price="$1")  # 6
        + _row(value="4k7")  # 7: good
        + _row(kind="transistor", value="2N3094"),  # 8
        encoding="utf-8",
    )
    expected = [
        (3, "kind", "'resistr'"),
        (4, "quantity", "'0'"),
        (5, "value", "'100'"),
        (6, "price", "'$1'"),
        (8, "value", "'2N3094'"),
    ]
    for line, field, fragment in expected:
        err = _expect_problem(capsys, "stock", path, line, field, [fragment], count=len(expected))
    assert f"{len(expected)} problems:" in err


def test_duplicate_rows_are_merged_with_a_note(tmp_path, capsys):
    path = tmp_path / "s.csv"
    path.write_text(HEADER + _row(value="1k", quantity="5", tolerance="5 %") + _row(value="4K7")
                    + _row(value="1K", quantity="3", tolerance="5 %"), encoding="utf-8")
    capsys.readouterr()
    assert main(["stock", "--json", str(path)]) == 0
    out, err = capsys.readouterr()
    assert "note: line 4: same part as line 2 (resistor 1K); merged, 5 + 3 = 8 pieces" in err
    items = json.loads(out)
    assert [(i["value"], i["quantity"]) for i in items] == [(1000.0, 8), (4700.0, 5)]


def test_yaml_hfe_list_is_read(tmp_path, capsys):
    path = tmp_path / "s.yaml"
    path.write_text("- {kind: transistor, value: 2N3904, quantity: 2, hfe: [200, 210]}\n", encoding="utf-8")
    capsys.readouterr()
    assert main(["stock", "--json", str(path)]) == 0
    out, err = capsys.readouterr()
    assert json.loads(out)[0]["hfe"] == [200.0, 210.0], err


def test_the_bundled_stock_list_loads(capsys):
    code, out, err = _run(capsys, "stock", ROOT / "catalog" / "coop-drawer.csv")
    assert code == 0, err
    assert "pieces" in out


# ---------------------------------------------------------------------------------------
# Design files
#
# Line numbers of BASE_DESIGN: topology 1, supply 2, ambient 3, load 4, transistor 5,
# inputs 6, parts 7, R1 8, R2 9, R3 10, R4 11, R5 12, C3 13, C1 14, R6 15, C2 16, R7 17, C4 18.

BASE_DESIGN = """\
topology: divider-ce
supply: {nominal: 9 V, min: 7 V, max: 9.6 V}
ambient: {min: 5 °C, max: 35 °C}
load: {resistance: 10k}
transistor: 2N3904
inputs: [{source_resistance: 1k}, {source_resistance: 1k}]
parts:
  R1: {role: bias_top, value: 47k}
  R2: {role: bias_bottom, value: 10k}
  R3: {role: collector, value: 2k2}
  R4: {role: emitter, value: 100}
  R5: {role: emitter_bypassed, value: 1k}
  C3: {role: bypass_cap, value: 100u}
  C1: {role: input_cap, input: 1, value: 10u}
  R6: {role: input_series, input: 1, value: 10k}
  C2: {role: input_cap, input: 2, value: 10u}
  R7: {role: input_series, input: 2, value: 10k}
  C4: {role: output_cap, value: 10u}
"""

R3 = "  R3: {role: collector, value: 2k2}\n"
POT = "  RV1: {role: level_pot, input: 1, value: 10k, taper: log, position: 1}\n"


def D(*pairs: tuple[str, str]) -> str:
    return _edit(BASE_DESIGN, *pairs)


DESIGN_CASES = [
    ("unknown-role", D(("{role: collector,", "{role: colector,")), 10, "parts.R3.role",
     ["'colector' is not allowed", "did you mean 'collector'?", "allowed: bias_top, bias_bottom, collector"]),
    ("missing-collector", D((R3, "")), 8, "parts", ["no part has role collector", "collector load resistor"]),
    ("duplicate-role", D(("R4: {role: emitter,", "R4: {role: collector,")), 11, "parts.R4",
     ["role collector is already taken by R3"]),
    ("per-input-role-without-input", D(("C1: {role: input_cap, input: 1,", "C1: {role: input_cap,")), 14, "parts.C1.input",
     ["is missing", "role input_cap belongs to one input, 1 to 2"]),
    ("input-out-of-range", D(("C1: {role: input_cap, input: 1,", "C1: {role: input_cap, input: 3,")), 14,
     "parts.C1.input", ["3 is out of range", "from 1 to 2"]),
    ("input-on-a-shared-role", D(("{role: collector, value: 2k2}", "{role: collector, input: 1, value: 2k2}")), 10,
     "parts.R3.input", ["role collector is not per input", "remove input"]),
    ("bypass-cap-without-emitter-bypassed", D(("  R5: {role: emitter_bypassed, value: 1k}\n", "")), 12, "parts.C3",
     ["role bypass_cap needs a part with role emitter_bypassed"]),
    ("bad-designator", D(("  R4: {role: emitter", "  X1: {role: emitter")), 11, "parts.X1",
     ["a designator is letters and a number", "R1, C2, RV1"]),
    ("designator-of-another-kind", D(("  R4: {role: emitter", "  C9: {role: emitter")), 11, "parts.C9",
     ["is named R<number>", "got C9"]),
    ("pot-position-1.5", BASE_DESIGN + POT.replace("position: 1", "position: 1.5"), 19, "parts.RV1.position",
     ["1.5 is out of range", "0.0 to 1.0"]),
    ("pot-taper-misspelt", BASE_DESIGN + POT.replace("taper: log", "taper: logg"), 19, "parts.RV1.taper",
     ["'logg' is not allowed", "did you mean 'log'?", "allowed: linear, log"]),
    ("taper-on-a-resistor", D(("{role: collector, value: 2k2}", "{role: collector, value: 2k2, taper: log}")), 10,
     "parts.R3", ["taper and position apply to pots only"]),
    ("unknown-transistor", D(("transistor: 2N3904", "transistor: 2N3094")), 5, "transistor",
     ["unknown transistor type '2N3094'", "did you mean '2N3904'?", "or give an inline model"]),
    ("unknown-top-key", D(("transistor: 2N3904", "transistr: 2N3904")), 5, "transistr",
     ["unknown field", "did you mean 'transistor'?"]),
    ("unknown-part-field", D(("{role: collector, value: 2k2}", "{role: collector, valeu: 2k2}")), 10, "parts.R3.valeu",
     ["unknown field", "did you mean 'value'?", "role, input, value, tolerance"]),
    ("ambiguous-value", D(("{role: collector, value: 2k2}", "{role: collector, value: 2m2}")), 10, "parts.R3.value",
     ["'2m2' is not a valid resistance", "milli or mega"]),
    ("capacitance-without-unit", D(("C4: {role: output_cap, value: 10u}", "C4: {role: output_cap, value: 10}")), 18,
     "parts.C4.value", ["10 is not a valid capacitance", "10n or 10 µF"]),
    ("supply-min-above-max", D(("min: 7 V", "min: 10 V")), 2, "supply.min", ["min 10 V is above max 9.6 V"]),
    ("unknown-topology", D(("topology: divider-ce", "topology: divider")), 1, "topology",
     ["'divider' is not allowed", "did you mean 'divider-ce'?"]),
    ("duplicate-designator", D((R3, R3 + "  R3: {role: emitter, value: 100}\n")), 11, "parts.R3",
     ["is given twice", "first on line 10"]),
]


@pytest.mark.parametrize(("text", "line", "field", "fragments"), [c[1:] for c in DESIGN_CASES],
                         ids=[c[0] for c in DESIGN_CASES])
def test_bad_design(tmp_path, capsys, text, line, field, fragments):
    path = tmp_path / "design.yaml"
    path.write_text(text, encoding="utf-8")
    _expect_problem(capsys, "check", path, line, field, fragments)


def test_there_are_enough_design_cases():
    assert len(DESIGN_CASES) >= 8
    assert len({c[0] for c in DESIGN_CASES}) == len(DESIGN_CASES)


def test_the_base_design_checks(tmp_path, capsys):
    path = tmp_path / "design.yaml"
    path.write_text(BASE_DESIGN, encoding="utf-8")
    code, out, err = _run(capsys, "check", path)
    assert code == 0, err


def test_three_problems_in_one_design_are_reported_at_once(tmp_path, capsys):
    path = tmp_path / "design.yaml"
    path.write_text(D(("transistor: 2N3904", "transistor: 2N3094"), ("{role: collector,", "{role: colector,"),
                      ("value: 47k", "value: 47m")), encoding="utf-8")
    for line, field, fragment in [
        (5, "transistor", "'2N3094'"),
        (8, "parts.R1.value", "'47m'"),
        (10, "parts.R3.role", "'colector'"),
    ]:
        err = _expect_problem(capsys, "check", path, line, field, [fragment], count=3)
    assert "3 problems:" in err


# ---------------------------------------------------------------------------------------
# Errors survive pickling (Monte Carlo may run in worker processes)


@pytest.mark.parametrize(
    "err",
    [
        FileProblems([Problem("spec.yaml", 4, "supply.nominal", "9 is not a valid voltage"), Problem("s.csv", 0, "", "gone")]),
        ValueSyntaxError("4m7", "resistance", "a lower-case m could mean milli or mega", "write 4M7"),
        ValueSyntaxError(100, "capacitance", "a plain number could be pF, nF or µF"),
        CircuitError("node base floats", ("base",)),
        ConvergenceError("no operating point", ("collector", "emitter")),
    ],
    ids=["FileProblems", "ValueSyntaxError", "ValueSyntaxError-no-hint", "CircuitError", "ConvergenceError"],
)
def test_errors_survive_pickling(err):
    back = pickle.loads(pickle.dumps(err))
    assert type(back) is type(err)
    assert str(back) == str(err)
    assert back.exit_code == err.exit_code == 2
    if isinstance(err, FileProblems):
        assert back.problems == err.problems
    if isinstance(err, CircuitError):
        assert back.nodes == err.nodes
