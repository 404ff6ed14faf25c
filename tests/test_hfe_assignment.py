"""Measured transistors from the drawer assigned to positions, as the BOM says.

The rule is the trade's (common practice, no source): the highest β goes where β matters
most — a follower-ce's input buffer (its β multiplies the emitter load the source sees) and a
ce-follower's output buffer — and no piece is put where the design was not verified for its β.
The β ranges below are the ones a design's analysis was verified over (``Conditions.beta``).
"""

from __future__ import annotations

import pytest

from optimizer.outputs.bom import _transistor_rows, hfe_assignment
from optimizer.spec.stockfile import load_stock


def test_follower_input_buffer_gets_the_highest_piece_in_range():
    beta = {"Q1": (550.0, 300.0, 900.0), "Q2": (550.0, 300.0, 900.0)}
    notes = hfe_assignment("follower-ce", ["Q1", "Q2"], beta, [350, 900, 450, 1000, 280])
    assert notes["Q1"].startswith("Q1: fit the piece measured at hFE 900 (the highest left in range: Q1 is the input buffer")
    assert notes["Q2"].startswith("Q2: fit the piece measured at hFE 450")
    # 1000 and 280 lie outside 300–900: the design was not verified with them.
    assert notes["Q1"].endswith("not verified with the pieces at hFE 280, 1000")


def test_ce_follower_output_buffer_comes_first():
    beta = {"Q1": (200.0, 100.0, 300.0), "Q2": (200.0, 100.0, 300.0)}
    notes = hfe_assignment("ce-follower", ["Q1", "Q2"], beta, [150, 290, 210])
    assert "hFE 290" in notes["Q2"] and "output buffer" in notes["Q2"]
    assert "hFE 210" in notes["Q1"]


def test_single_stage_and_no_piece_in_range():
    notes = hfe_assignment("divider-ce", ["Q1"], {"Q1": (173.0, 100.0, 300.0)}, [165, 288, 204])
    assert notes == {"Q1": "Q1: fit the piece measured at hFE 288 (inside the β range 100–300 the design was verified over)"}
    notes = hfe_assignment("divider-ce", ["Q1"], {"Q1": (173.0, 100.0, 300.0)}, [420, 510])
    assert notes["Q1"].startswith("Q1: no measured piece lies inside the β range 100–300")


def test_the_bom_row_carries_the_assignment(tmp_path):
    from optimizer.analysis.evaluate import analyse
    from optimizer.search.verify import Verified
    from optimizer.spec.designfile import load_design

    (tmp_path / "drawer.csv").write_text(
        "kind,value,quantity,tolerance,rating,type,price,note,hfe\n"
        "transistor,2N3904,3,,,,0.08,bulk bag,165 288 204\n", encoding="utf-8")
    (tmp_path / "d.yaml").write_text(
        "topology: divider-ce\nsupply: 9 V\nambient: 25 °C\nload: {resistance: 10k}\ntransistor: 2N3904\n"
        "inputs: [{source_resistance: 1k}]\nparts:\n"
        "  R1: {role: bias_top, value: 47k}\n  R2: {role: bias_bottom, value: 10k}\n"
        "  R3: {role: collector, value: 2k2}\n  R4: {role: emitter, value: 470}\n"
        "  C1: {role: input_cap, input: 1, value: 10u}\n  R5: {role: input_series, input: 1, value: 1k}\n"
        "  C2: {role: output_cap, value: 10u}\n", encoding="utf-8")
    d = load_design(tmp_path / "d.yaml")
    an = analyse(d, large_signal=False)
    lo, hi = an.conditions.beta["Q1"][1:]
    assert lo <= 288 <= hi  # the catalog's β range for the type covers the pieces
    v = Verified(None, d, an, [], 0.0, {})
    rows = _transistor_rows(v, {}, load_stock(tmp_path / "drawer.csv"))
    assert len(rows) == 1
    assert "Q1: fit the piece measured at hFE 288" in rows[0]["note"]


@pytest.mark.parametrize("topology", ["cb-sum", "feedback-ce"])
def test_other_topologies_take_designator_order(topology):
    beta = {"Q1": (200.0, 100.0, 300.0)}
    assert "hFE 250" in hfe_assignment(topology, ["Q1"], beta, [120, 250])["Q1"]
