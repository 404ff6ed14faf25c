"""Design files of every topology: their roles are checked against the topology's ROLES.

Expected behaviour comes from the design-file rules in README ("Design files") and
DEVELOPERS.md ("Adding a topology"): a part names a role its topology has, each required
role is present once (per input where the role is per input), a part whose role
``requires`` another needs that one too, and every problem is reported as
``file:line: field: message`` with exit code 2. Line numbers are those of the design text
written here. The designs are those compared with ngspice in
tests/test_topologies_vs_ngspice.py (importing them needs no ngspice).
"""

from __future__ import annotations

import importlib

import pytest

from optimizer.circuit.topologies import TOPOLOGIES, get_topology
from test_bad_inputs import _expect_problem
from test_topologies_vs_ngspice import DESIGNS

NEW = [t for t in TOPOLOGIES if t != "divider-ce"]
#: The first design of each new topology.
FIRST = {t: next(text for name, (text, _) in DESIGNS.items() if name.startswith(t + "-")) for t in NEW}


def _line_of(text: str, fragment: str) -> int:
    """1-based line number of the one line holding ``fragment``."""
    hits = [i for i, ln in enumerate(text.splitlines(), start=1) if fragment in ln]
    assert len(hits) == 1, (fragment, hits)
    return hits[0]


def _part_line(text: str, role: str) -> str:
    """The design-file line of the (first) part with ``role``."""
    return next(ln for ln in text.splitlines() if f"{{role: {role}," in ln)


@pytest.mark.parametrize("topology", NEW)
def test_module_follows_the_topology_contract(topology):
    # Source: DEVELOPERS.md "Adding a topology" (NAME, SUMMARY, ROLES, ORDER, build()) and the
    # registry's docstring (a small drawing in each module's docstring).
    mod = get_topology(topology)
    assert mod.NAME == topology
    assert mod.SUMMARY
    assert "Q1" in mod.__doc__ and "──" in mod.__doc__
    names = [r.name for r in mod.ROLES]
    assert len(names) == len(set(names))
    assert sorted(mod.ORDER) == sorted(names), "ORDER must name every role once"
    for r in mod.ROLES:
        assert r.kind in ("R", "C", "POT") and r.lo < r.hi
        assert r.requires is None or r.requires in names
    # The per-input front end is the same in every topology.
    front = {r.name: (r.kind, r.optional) for r in mod.ROLES if r.per_input}
    assert front == {"input_cap": ("C", False), "level_pot": ("POT", True), "input_series": ("R", False)}
    assert importlib.import_module(mod.__name__).build is mod.build


@pytest.mark.parametrize("topology", NEW)
def test_role_of_another_topology_is_refused(tmp_path, capsys, topology):
    text = FIRST[topology]
    line = _part_line(text, "output_cap")
    foreign = next(r.name for t in TOPOLOGIES if t != topology for r in get_topology(t).ROLES
                   if r.kind == "C" and r.name not in {x.name for x in get_topology(topology).ROLES})
    bad = text.replace(line, line.replace("role: output_cap,", f"role: {foreign},"))
    ref = line.split(":")[0].strip()
    path = tmp_path / "design.yaml"
    path.write_text(bad, encoding="utf-8")
    _expect_problem(capsys, "check", path, _line_of(bad, f"role: {foreign},"), f"parts.{ref}.role",
                    [f"'{foreign}' is not allowed", f"not of {topology}", "output_cap"])


@pytest.mark.parametrize("topology", NEW)
def test_missing_required_role_is_reported(tmp_path, capsys, topology):
    text = FIRST[topology]
    required = next(r for r in get_topology(topology).ROLES if not r.optional and not r.per_input and r.kind == "R")
    bad = text.replace(_part_line(text, required.name) + "\n", "")
    path = tmp_path / "design.yaml"
    path.write_text(bad, encoding="utf-8")
    # The problem is placed where the parts mapping starts: the line after "parts:" (as the
    # missing-collector case of tests/test_bad_inputs.py).
    _expect_problem(capsys, "check", path, _line_of(bad, "parts:") + 1, "parts",
                    [f"no part has role {required.name}", required.description])


@pytest.mark.parametrize("topology", NEW)
def test_misspelt_role_gets_a_hint(tmp_path, capsys, topology):
    text = FIRST[topology]
    role = next(r.name for r in get_topology(topology).ROLES if not r.per_input and len(r.name) > 6)
    line = _part_line(text, role)
    bad = text.replace(line, line.replace(f"role: {role},", f"role: {role[:-1]},"))
    path = tmp_path / "design.yaml"
    path.write_text(bad, encoding="utf-8")
    _expect_problem(capsys, "check", path, _line_of(bad, f"role: {role[:-1]},"), f"parts.{line.split(':')[0].strip()}.role",
                    [f"'{role[:-1]}' is not allowed", f"did you mean '{role}'?"])


def test_feedback_cap_needs_the_split_resistor(tmp_path, capsys):
    text = FIRST["feedback-ce"]
    assert "feedback_split" not in text
    line = _part_line(text, "output_cap")
    bad = text.replace(line, line + "\n  C9: {role: feedback_cap, value: 10u}")
    path = tmp_path / "design.yaml"
    path.write_text(bad, encoding="utf-8")
    _expect_problem(capsys, "check", path, _line_of(bad, "C9:"), "parts.C9",
                    ["role feedback_cap needs a part with role feedback_split"])


def test_gain_bypass_cap_needs_its_resistor(tmp_path, capsys):
    text = FIRST["follower-ce"]
    bad = text.replace(_part_line(text, "gain_emitter_bypassed") + "\n", "")
    path = tmp_path / "design.yaml"
    path.write_text(bad, encoding="utf-8")
    _expect_problem(capsys, "check", path, _line_of(bad, "role: gain_bypass_cap,"),
                    f"parts.{_part_line(bad, 'gain_bypass_cap').split(':')[0].strip()}",
                    ["role gain_bypass_cap needs a part with role gain_emitter_bypassed"])
