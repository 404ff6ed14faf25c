"""Run ngspice in batch mode on a netlist and read the numbers it prints.

Used by the tests that compare our analysis with ngspice as an independent simulator.
Three kinds of output are read from the control block's results:

* ``print`` of single-point vectors and ``let`` results: ``name = 1.234e+00``;
* ``meas`` results: ``name   =  1.234e+00`` (the same shape);
* ``fourier``: the THD line and the harmonic table of each ``Fourier analysis for ...`` block.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

__all__ = ["Fourier", "SpiceError", "find_ngspice", "fourier", "run", "values"]

TIMEOUT = 60.0

_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_VALUE = re.compile(rf"^\s*(\S+)\s+=\s+({_NUMBER})\s*$")
_FOURIER_HEAD = re.compile(r"^Fourier analysis for (\S+):")
_THD = re.compile(rf"THD:\s*({_NUMBER})\s*%")
_HARMONIC = re.compile(rf"^\s*(\d+)\s+({_NUMBER})\s+({_NUMBER})\s+({_NUMBER})\s+({_NUMBER})\s+({_NUMBER})\s*$")


class SpiceError(RuntimeError):
    """ngspice failed, timed out, or did not print what was asked for."""


def find_ngspice() -> str | None:
    """Path of the ngspice executable, or None when it is not installed."""
    return shutil.which("ngspice")


def run(netlist: str, timeout: float = TIMEOUT) -> str:
    """Simulate ``netlist`` with ``ngspice -b`` in a temporary directory; return its stdout.

    The netlist should carry its analyses in a ``.control`` block ending in ``quit``.

    Raises
    ------
    SpiceError
        If ngspice is missing, exits with an error, times out or reports an error (a failed
        ``meas`` only says so on stderr), with ngspice's stderr and the end of its stdout.
    """
    exe = find_ngspice()
    if exe is None:
        raise SpiceError("ngspice not found on PATH")
    with tempfile.TemporaryDirectory(prefix="stagefit-spice-") as tmp:
        path = Path(tmp) / "circuit.cir"
        path.write_text(netlist)
        try:
            proc = subprocess.run([exe, "-b", str(path)], cwd=tmp, capture_output=True, text=True, timeout=timeout)
        except subprocess.TimeoutExpired as exc:
            raise SpiceError(f"ngspice did not finish within {timeout:g} s") from exc
    errors = [ln for ln in proc.stderr.splitlines() if "error" in ln.lower()]
    if proc.returncode != 0 or errors:
        tail = "\n".join(proc.stdout.splitlines()[-30:])
        raise SpiceError(
            f"ngspice failed (exit code {proc.returncode})\n--- stderr ---\n{proc.stderr.strip()}"
            f"\n--- end of stdout ---\n{tail}\n--- netlist ---\n{netlist}"
        )
    return proc.stdout


def values(output: str, *names: str) -> dict[str, float]:
    """The ``name = number`` lines of ngspice's output (``print``, ``meas``), as floats.

    Names are matched case-insensitively. Every name asked for must be present.
    """
    found: dict[str, float] = {}
    for line in output.splitlines():
        m = _VALUE.match(line)
        if m:
            found[m.group(1).lower()] = float(m.group(2))
    missing = [n for n in names if n.lower() not in found]
    if missing:
        raise SpiceError(f"ngspice printed no value for {', '.join(missing)}; output was:\n{output}")
    return {n: found[n.lower()] for n in names} if names else found


@dataclass(frozen=True)
class Fourier:
    """One ``fourier`` result: THD (fraction, harmonics 2..n-1) and harmonic magnitudes (peak)."""

    vector: str
    thd: float
    magnitude: tuple[float, ...]  # index = harmonic number, 0 = DC

    @property
    def fundamental(self) -> float:
        return self.magnitude[1]


def fourier(output: str) -> list[Fourier]:
    """Every ``Fourier analysis for ...`` block of ngspice's output, in order."""
    blocks: list[Fourier] = []
    vector, thd, mags = None, None, []

    def close():
        if vector is not None:
            if thd is None or len(mags) < 2:
                raise SpiceError(f"incomplete fourier output for {vector}:\n{output}")
            blocks.append(Fourier(vector, thd, tuple(mags)))

    for line in output.splitlines():
        head = _FOURIER_HEAD.match(line)
        if head:
            close()
            vector, thd, mags = head.group(1), None, []
            continue
        if vector is None:
            continue
        t = _THD.search(line)
        if t:
            thd = float(t.group(1)) / 100.0
            continue
        h = _HARMONIC.match(line)
        if h and int(h.group(1)) == len(mags):
            mags.append(float(h.group(3)))
    close()
    if not blocks:
        raise SpiceError(f"ngspice printed no fourier analysis; output was:\n{output}")
    return blocks
