"""The bundled specs end to end: the search finds a design, and ngspice says it meets the spec.

For each spec in ``specs/`` the real ``stagefit design`` command is run (a short time limit,
the spec's own seed, the top design only). Its design 1 must be reported as ``optimal`` or
``feasible``. Then the SPICE netlist it wrote (``design-1.cir``) is simulated in ngspice —
outside our own analysis code, which only wrote the netlist — at every corner of

* transistor β: ``beta_min`` and ``beta_max`` of the design's JSON ``model`` (set as ``BF``
  on the ``.model`` card; ngspice applies its own ``XTB`` temperature scaling on top),
* supply: the spec's ``min`` and ``max``,
* temperature: the spec's ambient ``min``, nominal and ``max`` (``.temp``),

at nominal part values, and every target of the spec is checked on ngspice's numbers:

* gain at 1 kHz, each input driven alone (the other sources stay connected, at rest) — within
  the spec's window;
* input impedance at 1 kHz, from the current through the source resistance — ≥ the spec's min;
* −3 dB corners from an AC sweep, relative to the 1 kHz gain, each input — low ≤ max,
  high ≥ min;
* supply current from the operating point — ≤ the spec's max;
* headroom/swing: a settled 1 kHz transient with the output at the level the spec requires
  (``Targets.required_swing()``: the headroom's nominal level raised by its minimum, or the
  swing minimum), THD by ngspice's ``fourier`` ≤ the spec's distortion limit; and for each
  input with a ``max_level``, that input driven at its ``max_level``, THD ≤ the limit.

Part tolerances are *not* varied in ngspice: the search's margins already cover them at their
worst vertices (our analysis checks every part at the ends of its tolerance), so at nominal
parts ngspice must find every target met with room to spare at every global corner.

Every limit checked comes from the spec file (each named where it is used); every value it is
compared with comes from an ngspice 39 batch run on the exported netlist.
"""

from __future__ import annotations

import itertools
import json
import os
import re
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import pytest

import spice_runner
from optimizer.spec.specfile import load_spec

ROOT = Path(__file__).resolve().parent.parent
SPECS = ["street-duo-mixer", "classroom-line-stage", "rehearsal-line-driver"]

#: Time limit per spec, seconds of the search's clock (which counts work: the same answer
#: however fast the machine, as the wall bound is lifted here; these three also answered the
#: same on a second kind of processor, see README "Known limits"). Enough for each of the
#: three specs to find a design that passes every target (measured: 15 s found one for
#: each); this file takes about 2 minutes on a 2-core machine. Only the top design is asked
#: for.
TIME_LIMIT = 15

needs_ngspice = pytest.mark.skipif(
    spice_runner.find_ngspice() is None,
    reason="ngspice not found: install it (Debian/Ubuntu: apt-get install ngspice) to simulate the bundled designs",
)

# Transient for THD: time step, length. Started from the operating point, these stages
# settle within a few output-capacitor time constants (measured on the street-duo design:
# THD 0.5198 % after 0.1 s, 0.5203 % after 2 s); that the last two periods agree is checked.
TRAN_STEP = 5e-6
TRAN_STOP = 0.12
PERIOD = 1e-3
SETTLED = 1e-3  # relative difference allowed between the last two periods' peak-to-peak
LEVEL_RUNS = 5  # at most this many transients to bring the output up to the required level

#: Targets this file checks. A spec with any other target fails the coverage test below
#: rather than pass unchecked.
CHECKED = {"gain", "headroom_nominal", "headroom_min", "swing_min", "input_impedance_min", "low_cutoff_max",
           "high_cutoff_min", "supply_current_max", "distortion_max"}


# --- the designs ---------------------------------------------------------------------------
@dataclass
class Designed:
    name: str
    spec: object
    proc: subprocess.CompletedProcess
    out: Path
    data: dict | None


_CACHE: dict[str, Designed] = {}


def _design(name: str, tmp_path_factory) -> Designed:
    if name not in _CACHE:
        out = tmp_path_factory.mktemp(name) / "out"
        env = dict(os.environ)
        env["PYTHONPATH"] = os.pathsep.join([str(ROOT), env.get("PYTHONPATH", "")]).rstrip(os.pathsep)
        cmd = [sys.executable, "-m", "optimizer", "design", str(ROOT / "specs" / f"{name}.yaml"), "--json",
               "--out", str(out), "--time-limit", str(TIME_LIMIT), "--wall-limit", "0", "--top", "1"]
        proc = subprocess.run(cmd, capture_output=True, text=True, env=env, timeout=TIME_LIMIT + 240, cwd=ROOT)
        try:
            data = json.loads(proc.stdout)
        except json.JSONDecodeError:
            data = None
        _CACHE[name] = Designed(name, load_spec(ROOT / "specs" / f"{name}.yaml"), proc, out, data)
    return _CACHE[name]


@pytest.fixture(scope="module")
def designed(tmp_path_factory):
    return lambda name: _design(name, tmp_path_factory)


def _top(d: Designed) -> dict:
    if not (d.data and d.data.get("designs")):
        pytest.fail(f"{d.name}: no design to simulate (exit code {d.proc.returncode}); "
                    f"stderr: {d.proc.stderr.strip()[-2000:]}")
    return d.data["designs"][0]


# --- netlist editing -----------------------------------------------------------------------
def _sub1(pattern: str, repl: str, text: str, what: str) -> str:
    new, n = re.subn(pattern, repl, text, flags=re.MULTILINE)
    assert n == 1, f"expected one {what} in the exported netlist, found {n}:\n{text}"
    return new


@dataclass(frozen=True)
class Corner:
    beta: float
    supply: float
    temperature_c: float

    def __str__(self) -> str:
        return f"β {self.beta:g}, supply {self.supply:g} V, {self.temperature_c:g} °C"


class Netlist:
    """design-1.cir and the edits that place it at a corner and drive one input. Every
    transistor's ``.model`` card gets the corner's β (one transistor type per design)."""

    def __init__(self, text: str):
        self.text = text
        self.inputs = sorted(int(k) for k in re.findall(r"^VIN(\d+) in\d+ 0 DC 0 AC 1$", text, flags=re.MULTILINE))
        assert self.inputs, f"no source VIN1.. in the exported netlist:\n{text}"
        self.transistors = len(re.findall(r"^Q\d+ \S+ \S+ \S+ \S+$", text, flags=re.MULTILINE))
        assert self.transistors, f"no transistor in the exported netlist:\n{text}"
        self.rs = {}
        for k in self.inputs:
            m = re.search(rf"^RS{k} in{k} src{k} (\S+)$", text, flags=re.MULTILINE)
            assert m, f"no source resistance RS{k} in{k} src{k} in the exported netlist:\n{text}"
            self.rs[k] = float(m.group(1))

    def at(self, c: Corner, k: int, sine: float | None, control: list[str]) -> str:
        t = self.text
        t, n = re.subn(r"^(\.model \S+ (?:NPN|PNP) \(.*\bBF=)\S+?( .*\))$", rf"\g<1>{c.beta:.9g}\g<2>", t,
                      flags=re.MULTILINE)
        assert n == self.transistors, f"expected BF on {self.transistors} .model card(s), found {n}:\n{self.text}"
        t = _sub1(r"^(VCC vcc 0 DC )\S+$", rf"\g<1>{c.supply:.9g}", t, "supply VCC vcc 0")
        t = _sub1(r"^\.temp \S+$", f".temp {c.temperature_c:.9g}", t, ".temp line")
        for j in self.inputs:
            line = f"VIN{j} in{j} 0 DC 0" + (" AC 1" if j == k else "")
            if j == k and sine is not None:
                line += f" SIN(0 {sine:.9g} 1k)"
            t = _sub1(rf"^VIN{j} in{j} 0 DC 0 AC 1$", line, t, f"source VIN{j}")
        t = _sub1(r"^\.end$", "\n".join(control) + "\n.end", t, ".end line")
        return t


def _small_signal(net: Netlist, c: Corner, k: int) -> dict[str, float]:
    """ngspice 39 batch run: op (supply current), 1 kHz gain and jack impedance of input k,
    and its −3 dB corners relative to the 1 kHz gain."""
    control = [
        ".options reltol=1e-6",
        ".control",
        "op",
        "let i_supply = -i(vcc)",
        "print i_supply",
        "ac lin 1 1k 1k",
        "let gain_db = db(v(out))",
        f"let zin = mag(v(src{k}) / ((v(in{k}) - v(src{k})) / {net.rs[k]:.9g}))",
        "print gain_db zin",
        "let level = db(v(out) / sqrt(2))",
        'set level = "$&level"',
        "ac dec 200 1e-3 1e9",
        "meas ac f_low when vdb(out)=$level cross=last from=1e-3 to=1000",
        "meas ac f_high when vdb(out)=$level cross=1 from=1000 to=1e9",
        "quit",
        ".endc",
    ]
    out = spice_runner.run(net.at(c, k, None, control))
    return spice_runner.values(out, "i_supply", "gain_db", "zin", "f_low", "f_high")


def _tran(net: Netlist, c: Corner, k: int, amplitude: float) -> tuple[spice_runner.Fourier, float, float]:
    """ngspice 39 batch run: a 1 kHz sine of ``amplitude`` (V peak) on source k; the Fourier
    analysis of the load voltage over the last period, and the last two periods' peak-to-peak."""
    t = TRAN_STOP
    control = [
        ".options reltol=1e-5",
        ".control",
        f"tran {TRAN_STEP:g} {t:.6g} {t - 2 * PERIOD:.6g} {TRAN_STEP:g}",
        "fourier 1k v(out)",
        f"meas tran pp_prev pp v(out) from={t - 2 * PERIOD:.6g} to={t - PERIOD:.6g}",
        f"meas tran pp_last pp v(out) from={t - PERIOD:.6g} to={t:.6g}",
        "print pp_prev pp_last",
        "quit",
        ".endc",
    ]
    out = spice_runner.run(net.at(c, k, amplitude, control))
    (f,) = spice_runner.fourier(out)
    pp = spice_runner.values(out, "pp_prev", "pp_last")
    return f, pp["pp_prev"], pp["pp_last"]


def _thd_at_output_level(net: Netlist, c: Corner, k: int, level: float, gain_db: float):
    """THD with the load's fundamental at ``level`` (V peak) or just above, driving source k.
    The drive starts from the 1 kHz gain and is scaled by the fundamental's shortfall."""
    amp = level / 10 ** (gain_db / 20) * 1.002
    for _ in range(LEVEL_RUNS):
        f, pp_prev, pp_last = _tran(net, c, k, amp)
        if level <= f.fundamental <= 1.02 * level:
            return f, amp, pp_prev, pp_last
        amp *= 1.002 * level / f.fundamental
    raise AssertionError(f"{c}: could not bring the output to {level:.4g} V peak in {LEVEL_RUNS} transients "
                         f"(last drive {amp:.4g} V, fundamental {f.fundamental:.4g} V)")


# --- tests ---------------------------------------------------------------------------------
@pytest.mark.slow
@pytest.mark.parametrize("name", SPECS)
def test_search_finds_a_design(designed, name):
    d = designed(name)
    assert d.data is not None, f"{name}: design --json printed no JSON (exit code {d.proc.returncode}): {d.proc.stderr[-2000:]}"
    # Status words and exit code: README ("Exit codes"; optimal or feasible when designs exist).
    assert d.data["status"] in ("optimal", "feasible"), (
        f"{name}: status {d.data['status']!r} in {TIME_LIMIT} s; notes: {d.data.get('notes')}")
    assert d.data["designs"], f"{name}: status {d.data['status']} but no design; notes: {d.data.get('notes')}"
    assert d.proc.returncode == 0, f"{name}: exit code {d.proc.returncode} with a design (README: 0 on success)"
    top = d.data["designs"][0]
    assert top["margin"] >= 0, f"{name}: design 1 has margin {top['margin']} (a reported design meets every target)"
    assert (d.out / "design-1.cir").is_file(), f"{name}: design-1.cir was not written to {d.out}"


@pytest.mark.parametrize("name", SPECS)
def test_every_target_of_the_spec_is_covered_here(name):
    t = load_spec(ROOT / "specs" / f"{name}.yaml").targets
    unchecked = [f for f, v in vars(t).items() if v is not None and f not in CHECKED]
    assert not unchecked, f"{name}: targets {unchecked} are not checked against ngspice by this file"


@pytest.mark.slow
@pytest.mark.ngspice
@needs_ngspice
@pytest.mark.parametrize("name", SPECS)
def test_top_design_meets_the_spec_in_ngspice(designed, name):
    d = designed(name)
    top = _top(d)
    spec = d.spec
    tg = spec.targets
    net = Netlist((d.out / "design-1.cir").read_text(encoding="utf-8"))
    n = len(spec.inputs)
    assert net.inputs == list(range(1, n + 1)), f"{name}: netlist sources {net.inputs}, spec has {n} inputs"
    betas = (top["model"]["beta_min"], top["model"]["beta_max"])  # the design's JSON model
    supplies = (spec.supply.min, spec.supply.max)  # the spec's supply range
    temps = sorted({spec.ambient.min - 273.15, spec.ambient.nominal - 273.15, spec.ambient.max - 273.15})  # spec's ambient
    corners = [Corner(b, s, t) for b, s, t in itertools.product(betas, supplies, temps)]
    required = tg.required_swing()  # the spec's headroom (nominal + min) or swing target, V peak
    thd_max = tg.distortion_max  # the spec's distortion limit (fraction)

    misses: list[str] = []
    lines: list[str] = []

    def miss(target: str, c: Corner, value: str, limit: str) -> None:
        misses.append(f"{target} at {c}: ngspice {value}, limit {limit}")

    for c in corners:
        ss = {k: _small_signal(net, c, k) for k in net.inputs}  # ngspice 39 batch run on design-1.cir
        cur = ss[1]["i_supply"]
        lines.append(f"{c}: supply current {cur * 1e3:.4g} mA; " + "; ".join(
            f"in {k}: {s['gain_db']:+.3f} dB, Zin {s['zin']:.4g} Ω, {s['f_low']:.3g}–{s['f_high']:.4g} Hz"
            for k, s in ss.items()))
        if tg.supply_current_max is not None and cur > tg.supply_current_max:  # the spec's supply_current.max
            miss("supply current", c, f"{cur * 1e3:.4g} mA", f"≤ {tg.supply_current_max * 1e3:.4g} mA")
        for k, s in ss.items():
            who = f"input {k} ({spec.inputs[k - 1].name})"
            if tg.gain is not None and not tg.gain.min <= s["gain_db"] <= tg.gain.max:  # the spec's gain window
                miss(f"gain, {who}", c, f"{s['gain_db']:+.3f} dB", f"{tg.gain.min:+.2f} .. {tg.gain.max:+.2f} dB")
            if tg.input_impedance_min is not None and s["zin"] < tg.input_impedance_min:  # spec's input_impedance.min
                miss(f"input impedance, {who}", c, f"{s['zin']:.5g} Ω", f"≥ {tg.input_impedance_min:.5g} Ω")
            if tg.low_cutoff_max is not None and s["f_low"] > tg.low_cutoff_max:  # the spec's low_cutoff.max
                miss(f"low cutoff, {who}", c, f"{s['f_low']:.4g} Hz", f"≤ {tg.low_cutoff_max:.4g} Hz")
            if tg.high_cutoff_min is not None and s["f_high"] < tg.high_cutoff_min:  # the spec's high_cutoff.min
                miss(f"high cutoff, {who}", c, f"{s['f_high']:.5g} Hz", f"≥ {tg.high_cutoff_min:.5g} Hz")
        # Large signal: THD with the output at the level the spec requires (input 1 driven;
        # the output's limits are the stage's, the source only sets the drive), and each
        # source at its own max_level.
        runs = []
        if required is not None:
            runs.append(("headroom/swing" if tg.headroom_min is not None else "swing", 1, required, None))
        for k, inp in enumerate(spec.inputs, start=1):
            if inp.max_level is not None:  # the spec's inputs[k].max_level, V peak
                runs.append((f"overload {inp.name}", k, None, inp.max_level))
        for target, k, level, drive in runs:
            if level is not None:
                f, amp, pp_prev, pp_last = _thd_at_output_level(net, c, k, level, ss[k]["gain_db"])
                what = f"THD at {f.fundamental:.4g} V peak out (required {level:.4g} V)"
            else:
                f, pp_prev, pp_last = _tran(net, c, k, drive)
                amp = drive
                what = f"THD at {drive:.4g} V peak into input {k} ({f.fundamental:.4g} V peak out)"
            # Not a target: the transient must have settled for its THD to mean anything.
            assert abs(pp_last - pp_prev) <= SETTLED * pp_last, (
                f"{name}, {target} at {c}: transient not settled after {TRAN_STOP:g} s "
                f"(peak-to-peak {pp_prev:.6g} then {pp_last:.6g} V)")
            lines.append(f"    {target}: drive {amp:.4g} V, {what}: {100 * f.thd:.4f} %")
            if f.thd > thd_max:  # the spec's distortion.max
                miss(target, c, f"{what} {100 * f.thd:.4g} %", f"THD ≤ {100 * thd_max:g} %")

    print(f"\n{name} design 1 ({top['transistor']}, margin {top['margin']:+.4f}) in ngspice:\n" + "\n".join(lines))
    assert not misses, (f"{name}: design 1 ({top['transistor']}, margin {top['margin']:+.4f}) misses in ngspice "
                        f"(nominal parts):\n  " + "\n  ".join(misses))
