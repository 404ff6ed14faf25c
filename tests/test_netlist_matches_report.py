"""The netlist ``stagefit design`` writes is the circuit its report describes.

``stagefit design`` is run on the small test spec ``tests/data/tiny2.yaml`` (it finishes in a
few seconds). Each design's ``design-N.cir`` is simulated in ngspice exactly as written — at
the nominal conditions it carries (nominal supply on ``VCC``, nominal β as ``BF``, the
ambient's nominal temperature on ``.temp``) — with an operating point and a 1 kHz AC
analysis, and the figures the written ``result.json`` states for that design at nominal
(``metrics.nominal``) must match: transistor terminal voltages, collector current and supply
current within 1 %, the 1 kHz gain of every input within 0.1 dB. The report's bring-up sheet
(design 1's "typical" readings, printed to 3 significant digits) must match ngspice too.

Check values: the ngspice 39 batch runs on the written netlists. The tolerances are those of
tests/test_vs_ngspice.py (1 % for DC, 0.1 dB for gain; common practice, no source), plus the
report's own rounding where its printed numbers are read.
"""

from __future__ import annotations

import html
import json
import math
import os
import re
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import pytest

import spice_runner

pytestmark = [
    pytest.mark.ngspice,
    pytest.mark.skipif(
        spice_runner.find_ngspice() is None,
        reason="ngspice not found: install it (Debian/Ubuntu: apt-get install ngspice) to simulate the written netlists",
    ),
]

ROOT = Path(__file__).resolve().parent.parent
SPEC = ROOT / "tests" / "data" / "tiny2.yaml"
TIME_LIMIT = 20  # tiny2 is small: divider-ce alone is proved optimal in about a second

TOL_DC = 0.01  # relative; as tests/test_vs_ngspice.py (common practice, no source)
TOL_GAIN_DB = 0.1  # dB; as tests/test_vs_ngspice.py (common practice, no source)

_SI = {"G": 1e9, "M": 1e6, "k": 1e3, "": 1.0, "m": 1e-3, "µ": 1e-6, "u": 1e-6, "n": 1e-9, "p": 1e-12}


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    out = tmp_path_factory.mktemp("tiny2") / "out"
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), env.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    cmd = [sys.executable, "-m", "optimizer", "design", str(SPEC), "--json", "--out", str(out),
           "--time-limit", str(TIME_LIMIT), "--wall-limit", "0"]
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env, timeout=TIME_LIMIT + 120, cwd=ROOT)
    assert proc.returncode == 0, f"design failed (exit code {proc.returncode}): {proc.stderr[-2000:]}"
    data = json.loads((out / "result.json").read_text(encoding="utf-8"))
    assert data["designs"], f"no design for tiny2: {data['status']}, {data['notes']}"
    return out, data


def _transistors(netlist: str) -> dict[str, tuple[str, str, str]]:
    """Each transistor of the netlist: its collector, base and emitter nodes."""
    qs = {m.group(1): m.groups()[1:4]
          for m in re.finditer(r"^(Q\d+) (\S+) (\S+) (\S+) \S+$", netlist, flags=re.MULTILINE)}
    assert qs, f"no transistor in the netlist:\n{netlist}"
    return qs


def _simulate(netlist: str, k: int, n_inputs: int) -> dict[str, float]:
    """ngspice 39 batch run of the written netlist, only source k driven (AC 1; the others
    at rest): operating point of every transistor and the supply, and the 1 kHz gain to the
    load. Keys ``vb_q1``, ``vc_q1``, ``ve_q1``, ``ic_q1`` (and so on for Q2 …), ``i_supply``,
    ``gain_db``."""
    qs = _transistors(netlist)
    text = netlist
    for j in range(1, n_inputs + 1):
        if j != k:
            text, count = re.subn(rf"^(VIN{j} in{j} 0 DC 0) AC 1$", r"\1", text, flags=re.MULTILINE)
            assert count == 1, f"no source VIN{j} in{j} 0 DC 0 AC 1 in the netlist:\n{netlist}"
    node = lambda n: "0" if n == "0" else f"v({n})"  # noqa: E731
    lets, names = [], []
    for ref, (c, b, e) in qs.items():
        q = ref.lower()
        lets += [f"let ic_{q} = @{q}[ic]", f"let vb_{q} = {node(b)}", f"let vc_{q} = {node(c)}", f"let ve_{q} = {node(e)}"]
        names += [f"vb_{q}", f"vc_{q}", f"ve_{q}", f"ic_{q}"]
    control = [
        # A tight tolerance: with the default ngspice reports its last Newton iterate's
        # device currents, up to 0.2 % off (see tests/test_vs_ngspice.py).
        ".options reltol=1e-6",
        ".control",
        "op",
        *lets,
        "let i_supply = -i(vcc)",
        "print " + " ".join(names) + " i_supply",
        "ac lin 1 1k 1k",
        "let gain_db = db(v(out))",
        "print gain_db",
        "quit",
        ".endc",
    ]
    text, count = re.subn(r"^\.end$", "\n".join(control) + "\n.end", text, flags=re.MULTILINE)
    assert count == 1, f"no .end line in the netlist:\n{netlist}"
    assert text.count(" AC 1") == 1, f"expected only VIN{k} driven:\n{text}"
    return spice_runner.values(spice_runner.run(text), *names, "i_supply", "gain_db")


def _rel(a: float, b: float) -> float:
    if b == 0:  # a node on ground (0 V): only an exact-enough 0 agrees
        return 0.0 if abs(a) < 1e-9 else math.inf
    return abs(a - b) / abs(b)


def test_netlist_carries_the_nominal_conditions(written):
    out, data = written
    for d in data["designs"]:
        text = (out / f"design-{d['rank']}.cir").read_text(encoding="utf-8")
        cond = d["conditions"]
        vcc = re.search(r"^VCC vcc 0 DC (\S+)$", text, flags=re.MULTILINE)
        temp = re.search(r"^\.temp (\S+)$", text, flags=re.MULTILINE)
        bfs = re.findall(r"^\.model \S+ (?:NPN|PNP) \(.*\bBF=(\S+?) ", text, flags=re.MULTILINE)
        assert vcc and temp and bfs, f"design {d['rank']}: netlist lacks VCC, .temp or BF:\n{text}"
        assert len(bfs) == len(_transistors(text)), f"design {d['rank']}: one .model card per transistor:\n{text}"
        # The design's JSON conditions (nominal supply, ambient and β); 6 digits on the card.
        assert float(vcc.group(1)) == pytest.approx(cond["supply"]["nominal"], rel=1e-9)
        assert float(temp.group(1)) == pytest.approx(cond["ambient_c"]["nominal"], abs=1e-6)
        assert all(float(bf) == pytest.approx(d["model"]["beta"], rel=1e-5) for bf in bfs), (bfs, d["model"]["beta"])


def test_operating_point_and_gain_match_the_written_figures(written):
    out, data = written
    bad, lines = [], []
    for d in data["designs"]:
        nom = d["metrics"]["nominal"]
        op = nom["operating_point"]
        sign = 1.0 if d["model"]["polarity"] == "npn" else -1.0
        text = (out / f"design-{d['rank']}.cir").read_text(encoding="utf-8")
        n = len(nom["inputs"])
        sims = [_simulate(text, k, n) for k in range(1, n + 1)]  # ngspice 39 batch runs on design-N.cir
        sp = sims[0]
        qs = _transistors(text)
        assert sorted(nom["transistors"]) == sorted(qs), (
            f"design {d['rank']}: JSON transistors {sorted(nom['transistors'])}, netlist {sorted(qs)}")
        pairs = {"supply current": (op["supply_current"], sp["i_supply"])}
        for ref, t in nom["transistors"].items():
            q = ref.lower()
            pairs.update({
                f"{ref} vb": (t["vb"], sp[f"vb_{q}"]),
                f"{ref} vc": (t["vc"], sp[f"vc_{q}"]),
                f"{ref} ve": (t["ve"], sp[f"ve_{q}"]),
                f"{ref} vce": (t["vce"], sign * (sp[f"vc_{q}"] - sp[f"ve_{q}"])),
                # Ours is in the device's own sense; ngspice's @q[ic] flows into the collector.
                f"{ref} ic": (t["ic"], sign * sp[f"ic_{q}"]),
            })
        # The operating_point block states Q1's figures (the first transistor's).
        pairs.update({f"operating point {key}": (op[key], pairs[f"Q1 {key}"][1]) for key in ("vb", "vc", "ve", "ic")})
        for key, (ours, ref) in pairs.items():
            lines.append(f"design {d['rank']} {key}: JSON {ours:.6g}, ngspice {ref:.6g} ({100 * _rel(ours, ref):.3f} %)")
            if _rel(ours, ref) > TOL_DC:
                bad.append(f"design {d['rank']} {key}")
        for k, s in enumerate(sims, start=1):
            ours = nom["inputs"][k - 1]["gain_db"]
            lines.append(f"design {d['rank']} gain {k}: JSON {ours:.4f} dB, ngspice {s['gain_db']:.4f} dB")
            if abs(ours - s["gain_db"]) > TOL_GAIN_DB:
                bad.append(f"design {d['rank']} gain of input {k}")
    assert not bad, f"{', '.join(bad)} disagree:\n" + "\n".join(lines)


class _Cells(HTMLParser):
    """Every table of the page as rows of cell texts."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tables: list[list[list[str]]] = []
        self._cell: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        if tag == "table":
            self.tables.append([])
        elif tag == "tr" and self.tables:
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None and self.tables and self.tables[-1]:
            self.tables[-1][-1].append("".join(self._cell).strip())
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def _reading(text: str, unit: str) -> tuple[float, float]:
    """A printed reading such as ``2.81 V`` or ``461 µA``: its value and half a unit of the
    third significant digit (the report prints 3)."""
    m = re.fullmatch(rf"([-+]?\d+(?:\.\d+)?) ?([GMkmµunp]?){unit}", text.replace("\u00a0", " "))
    assert m, f"cannot read {text!r} as a reading in {unit}"
    v = float(m.group(1)) * _SI[m.group(2)]
    half = 0.5 * 10 ** (math.floor(math.log10(abs(v))) - 2) if v else 0.0  # "0 V" (a grounded emitter) is exact
    return v, half


def test_report_bring_up_sheet_matches_ngspice(written):
    out, data = written
    d = data["designs"][0]
    text = (out / "design-1.cir").read_text(encoding="utf-8")
    sp = _simulate(text, 1, len(d["metrics"]["nominal"]["inputs"]))  # ngspice 39 batch run on design-1.cir
    page = _Cells()
    page.feed((out / "report.html").read_text(encoding="utf-8"))
    sheets = [t for t in page.tables if t and t[0][:5] == ["reading", "where", "min", "typical", "max"]]
    assert len(sheets) == 1, "report.html should hold one bring-up sheet (reading, where, min, typical, max)"
    rows = {r[0]: r for r in sheets[0][1:]}
    want = {"Q1 base": (sp["vb_q1"], "V"), "Q1 emitter": (sp["ve_q1"], "V"), "Q1 collector": (sp["vc_q1"], "V"),
            "supply current": (sp["i_supply"], "A")}
    assert set(want) <= set(rows), f"bring-up sheet rows {sorted(rows)}; expected {sorted(want)}"
    bad, lines = [], []
    for name, (ref, unit) in want.items():
        typ, half = _reading(html.unescape(rows[name][3]), unit)
        lo, _ = _reading(html.unescape(rows[name][2]), unit)
        hi, _ = _reading(html.unescape(rows[name][4]), unit)
        lines.append(f"{name}: report {rows[name][2]} / {rows[name][3]} / {rows[name][4]}, ngspice {ref:.6g} {unit}")
        if abs(typ - ref) > TOL_DC * abs(ref) + half or not lo <= typ <= hi:
            bad.append(name)
    assert not bad, f"bring-up sheet of report.html disagrees with ngspice on {', '.join(bad)}:\n" + "\n".join(lines)
