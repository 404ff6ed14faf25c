"""``stagefit compare``: one spec designed at several supplies, side by side.

Two real runs on the bundled ``specs/rehearsal-line-driver.yaml`` (a 12 V spec):

* ``--supply 5 9 12 --json``: the JSON printed, and the compare.csv, compare.json and
  compare.png written to ``--out``;
* ``--supply 3`` in the form for people: the table printed and compare.csv. At 3 V the
  spec's headroom (1.41 V peak at 1 % THD, 10 dB above −10 dBV) cannot be reached, which the
  search proves at once, so this run shows the explanation of an infeasible supply.

Every check is against the spec's own targets (read from the spec file) or against another
output of the same run; none is a hard-coded result.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import re
import struct
import subprocess
import sys
from pathlib import Path

import pytest

from optimizer.spec.specfile import load_spec

ROOT = Path(__file__).resolve().parent.parent
SPEC = ROOT / "specs" / "rehearsal-line-driver.yaml"
SUPPLIES = [5.0, 9.0, 12.0]
#: Time limit per supply, seconds of the search's clock (work, not wall time; the wall bound
#: is lifted): enough for the 9 V and 12 V searches to find a design that passes every target.
TIME_LIMIT = 10
INFEASIBLE_SUPPLY = 3.0
FIGURES = ["margin", "parts", "gain_db", "headroom_db", "input_impedance", "supply_current"]
#: Target names the explanations may name: the spec's targets and the built-in active region.
TARGET_WORDS = ["gain", "headroom", "swing", "distortion", "input impedance", "low cutoff", "high cutoff",
                "supply current", "active region"]

pytestmark = pytest.mark.slow


def _run(*args: str, out: Path) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), env.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    cmd = [sys.executable, "-m", "optimizer", "compare", str(SPEC), *args, "--out", str(out),
           "--time-limit", str(TIME_LIMIT), "--wall-limit", "0"]
    return subprocess.run(cmd, capture_output=True, text=True, env=env, cwd=ROOT, timeout=900)


@pytest.fixture(scope="module")
def spec():
    return load_spec(SPEC)


@pytest.fixture(scope="module")
def json_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("compare-json") / "out"
    proc = _run("--supply", *[f"{v:g}" for v in SUPPLIES], "--json", out=out)
    try:
        data = json.loads(proc.stdout)
    except json.JSONDecodeError:
        pytest.fail(f"compare --json printed no JSON (exit code {proc.returncode}): {proc.stderr[-2000:]}")
    return proc, data, out


@pytest.fixture(scope="module")
def text_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("compare-text") / "out"
    return _run("--supply", f"{INFEASIBLE_SUPPLY:g}", out=out), out


def _read_csv(path: Path) -> list[dict]:
    return list(csv.DictReader(io.StringIO(path.read_text(encoding="utf-8"))))


def _check_explanations(why: list[str], lo: float, hi: float, where: str) -> None:
    assert why and all(isinstance(w, str) and w.strip() for w in why), f"{where}: no explanation ({why!r})"
    for w in why:
        # Each conflict names its supply range (the spec's range scaled to this supply) and a target.
        assert w.startswith(f"at {lo:g}–{hi:g} V, "), f"{where}: {w!r} does not name the supply range {lo:g}–{hi:g} V"
        assert any(t in w for t in TARGET_WORDS), f"{where}: {w!r} names none of the targets {TARGET_WORDS}"
        # A conflict is a target the others keep out of reach: what it could reach is below the
        # ask (optimizer/search/explain.py: Conflict.margin "≤ 0").
        m = re.search(r"the headroom can be at most ([-\d.]+) dB; asked ([-\d.]+) dB", w)
        if m:
            assert float(m.group(1)) < float(m.group(2)), f"{where}: {w!r} is no conflict: reachable above asked"


# --- --json ----------------------------------------------------------------------------------
def test_one_entry_per_supply_in_order(json_run, spec):
    proc, data, out = json_run
    assert data["spec"] == spec.name  # the spec file's name
    got = [e["supply"] for e in data["supplies"]]
    assert got == SUPPLIES, f"entries for {got}, asked {SUPPLIES}"  # the --supply arguments
    for e in data["supplies"]:
        k = e["supply"] / spec.supply.nominal
        # The spec's own range (11.4–12.6 V at 12 V), scaled to the nominal of this entry.
        assert e["supply_min"] == pytest.approx(spec.supply.min * k, rel=1e-9)
        assert e["supply_max"] == pytest.approx(spec.supply.max * k, rel=1e-9)
    # README exit codes: 0 when some supply has a design, else 3.
    assert any(e["feasible"] for e in data["supplies"]), f"no supply got a design in {TIME_LIMIT} s: {data}"
    assert proc.returncode == 0, f"exit code {proc.returncode} with feasible supplies: {proc.stderr[-2000:]}"


def test_feasible_supplies_have_a_design_that_meets_the_spec(json_run, spec):
    _, data, _ = json_run
    tg = spec.targets
    checked = 0
    for e in data["supplies"]:
        if not e["feasible"]:
            continue
        checked += 1
        v = e["supply"]
        assert e["status"] in ("optimal", "feasible"), f"{v:g} V: status {e['status']!r} with a design"
        missing = [f for f in FIGURES if e.get(f) is None]
        assert not missing and "design" in e, f"{v:g} V: no {missing or 'design'} for a feasible supply"
        d = e["design"]
        w = d["metrics"]["worst"]
        # The entry's figures are those of its design (the same run's JSON).
        assert e["margin"] == d["margin"] and e["parts"] == len(d["parts"]) + 1 and e["transistor"] == d["transistor"]
        assert d["conditions"]["supply"]["min"] == pytest.approx(e["supply_min"])
        assert d["conditions"]["supply"]["max"] == pytest.approx(e["supply_max"])
        # Against the spec's targets, worst corners as the JSON states them.
        assert e["margin"] >= 0, f"{v:g} V: margin {e['margin']}"  # a design meets every target: margin ≥ 0
        failing = [t["target"] for t in d["targets"] if not t["pass"] or t["margin"] < 0]
        assert not failing, f"{v:g} V: design misses {failing}"
        for k, inp in enumerate(w["inputs"], start=1):
            # The spec's gain window, at the lowest and highest gain over the corners.
            assert tg.gain.min <= inp["gain_db"] and inp["gain_db_max"] <= tg.gain.max, (
                f"{v:g} V input {k}: gain {inp['gain_db']:+.2f}..{inp['gain_db_max']:+.2f} dB, "
                f"spec {tg.gain.min:+.2f}..{tg.gain.max:+.2f} dB")
        assert tg.gain.min <= e["gain_db"] <= tg.gain.max, f"{v:g} V: nominal gain {e['gain_db']:+.2f} dB"
        # The spec's headroom: headroom_db is the worst swing above the nominal level.
        assert e["headroom_db"] == pytest.approx(20 * math.log10(e["swing"] / tg.headroom_nominal), abs=1e-9)
        assert e["headroom_db"] >= tg.headroom_min, f"{v:g} V: headroom {e['headroom_db']:.2f} dB < {tg.headroom_min} dB"
        assert e["swing"] >= tg.required_swing(), f"{v:g} V: swing {e['swing']:.4g} V < {tg.required_swing():.4g} V"
        assert e["input_impedance"] >= tg.input_impedance_min, f"{v:g} V: input impedance {e['input_impedance']:.4g} Ω"
        assert e["supply_current"] <= tg.supply_current_max, f"{v:g} V: supply current {e['supply_current']:.4g} A"
        assert e["supply_current"] == pytest.approx(w["supply_current"])
        assert w["low_cutoff"] <= tg.low_cutoff_max, f"{v:g} V: low cutoff {w['low_cutoff']:.4g} Hz"
        assert w["high_cutoff"] >= tg.high_cutoff_min, f"{v:g} V: high cutoff {w['high_cutoff']:.4g} Hz"
    assert checked, "no feasible supply to check"


def test_infeasible_supplies_say_why(json_run):
    _, data, _ = json_run
    for e in data["supplies"]:
        if e["feasible"]:
            continue
        v = e["supply"]
        assert e["status"] in ("infeasible", "unknown"), f"{v:g} V: status {e['status']!r} without a design"
        assert e["margin"] is None and "design" not in e, f"{v:g} V: no design but figures {e}"
        if e["status"] == "infeasible":
            _check_explanations(e["why"], e["supply_min"], e["supply_max"], f"{v:g} V")
        else:
            # Not proved either way in the time given: the note says so (no conflict is claimed).
            assert e["why"] and any("time" in w for w in e["why"]), f"{v:g} V: {e['why']!r}"


def test_compare_csv_has_one_row_per_supply(json_run):
    _, data, out = json_run
    rows = _read_csv(out / "compare.csv")
    need = ["supply", "status", *FIGURES, "why"]
    assert rows and all(c in rows[0] for c in need), f"compare.csv columns {list(rows[0]) if rows else []}, need {need}"
    assert [float(r["supply"]) for r in rows] == SUPPLIES  # the --supply arguments, in order
    for r, e in zip(rows, data["supplies"]):
        assert r["status"] == e["status"]
        for c in FIGURES:
            if e.get(c) is None:
                assert r[c] == "", f"{e['supply']:g} V: {c} {r[c]!r} for a supply without a design"
            else:  # the same run's JSON, written to 6 significant digits
                assert float(r[c]) == pytest.approx(e[c], rel=1e-5), f"{e['supply']:g} V: {c}"
        assert r["why"] == "; ".join(e.get("why", []))


def test_compare_json_and_plot_are_written(json_run):
    _, data, out = json_run
    assert json.loads((out / "compare.json").read_text(encoding="utf-8")) == data  # the same run's stdout
    png = (out / "compare.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n", "compare.png is not a PNG"  # the PNG signature (ISO/IEC 15948)
    width, height = struct.unpack(">II", png[16:24])  # IHDR
    assert width >= 200 and height >= 150, f"compare.png is {width}×{height}"  # a readable plot; common practice


# --- the form for people, at a supply no design can meet ---------------------------------------
def test_table_and_csv_explain_an_infeasible_supply(text_run, spec):
    proc, out = text_run
    # README exit codes: 3 when no design can meet the spec.
    assert proc.returncode == 3, f"exit code {proc.returncode}: {proc.stderr[-2000:]}"
    k = INFEASIBLE_SUPPLY / spec.supply.nominal
    lo, hi = spec.supply.min * k, spec.supply.max * k  # the spec's range scaled to 3 V
    lines = proc.stdout.splitlines()
    assert lines and re.fullmatch(rf"\s*{INFEASIBLE_SUPPLY:g} V", lines[0]), f"table head {lines[:1]!r}"
    assert any(re.fullmatch(r"status\s+infeasible", ln.strip()) for ln in lines), proc.stdout
    why = [ln.strip().split("not met: ", 1)[1] for ln in lines if ln.strip().startswith(f"{INFEASIBLE_SUPPLY:g} V not met: ")]
    _check_explanations(why, lo, hi, f"{INFEASIBLE_SUPPLY:g} V (table)")
    rows = _read_csv(out / "compare.csv")
    assert len(rows) == 1 and float(rows[0]["supply"]) == INFEASIBLE_SUPPLY and rows[0]["status"] == "infeasible"
    assert all(rows[0][c] == "" for c in FIGURES), rows[0]
    assert rows[0]["why"] == "; ".join(why)  # the explanation the table printed
    assert (out / "compare.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
