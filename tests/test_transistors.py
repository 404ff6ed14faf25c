"""The transistor catalog: bundled data, derived device models, derating, SPICE cards, and
the problems a malformed catalog file reports.

Sources of check values are named beside them:
  "§5 [S]"  the datasheet figure as collected, with its public source, in the project's
            domain reference (/work/shared/reference/domain-reference.md, section 5);
  "§5 [D]"  derived there from sourced figures;
  "common practice, no source"  a fact of the trade;
  "from memory"  not confirmed against a source.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from optimizer.catalog.transistors import BjtModel, TransistorType, load_transistors, transistor_types
from optimizer.errors import FileProblems
from optimizer.physics import T_REF, thermal_voltage

REQUIRED = [
    "2N3904", "2N3906", "BC547A", "BC547B", "BC547C", "BC548B", "BC548C", "BC549C",
    "BC550C", "BC557B", "BC560C", "2N2222A", "2N5088", "2N5089",
]
OPTIONAL = ["BC546B", "BC556B", "BC558B"]
ALL = REQUIRED + OPTIONAL


@pytest.fixture(scope="module")
def catalog() -> dict[str, TransistorType]:
    return load_transistors()


def test_bundled_catalog_loads_and_holds_every_required_type(catalog):
    missing = [n for n in REQUIRED if n not in catalog]
    assert not missing


@pytest.mark.parametrize("name", ALL)
def test_every_entry_names_its_source(catalog, name):
    t = catalog[name]
    assert "§5" in t.source
    assert "from memory" in t.source


# ---------------------------------------------------------------------------------------
# Datasheet figures against the domain reference, §5 table (T_A = 25 °C)

mA, uA, mW, MHz, pF = 1e-3, 1e-6, 1e-3, 1e6, 1e-12

# name: polarity, VCEO (V), IC max (A), Ptot (W), hFE min, hFE max, hFE test current (A)
DATASHEET = {
    "2N3904": ("npn", 40, 200 * mA, 625 * mW, 100, 300, 10 * mA),  # §5 [S] 2N3904 row
    "2N3906": ("pnp", 40, 200 * mA, 625 * mW, 100, 300, 10 * mA),  # §5 [S] 2N3906 row (magnitudes)
    "BC546B": ("npn", 65, 100 * mA, 500 * mW, 200, 450, 2 * mA),  # §5 [S] BC547 row: BC546 VCEO 65 V, group B
    "BC547A": ("npn", 45, 100 * mA, 500 * mW, 110, 220, 2 * mA),  # §5 [S] BC547 row, group A
    "BC547B": ("npn", 45, 100 * mA, 500 * mW, 200, 450, 2 * mA),  # §5 [S] BC547 row, group B
    "BC547C": ("npn", 45, 100 * mA, 500 * mW, 420, 800, 2 * mA),  # §5 [S] BC547 row, group C
    "BC548B": ("npn", 30, 100 * mA, 500 * mW, 200, 450, 2 * mA),  # §5 [S] BC548/BC549 row
    "BC548C": ("npn", 30, 100 * mA, 500 * mW, 420, 800, 2 * mA),  # §5 [S] BC548/BC549 row
    "BC549C": ("npn", 30, 100 * mA, 500 * mW, 420, 800, 2 * mA),  # §5 [S] BC548/BC549 row
    # BC550C: §5 [S] BC550 row, except VCEO 45 V, which §5 itself marks from memory [M]
    "BC550C": ("npn", 45, 100 * mA, 500 * mW, 420, 800, 2 * mA),
    "BC556B": ("pnp", 65, 100 * mA, 500 * mW, 200, 450, 2 * mA),  # §5 [S] BC557 row: BC556 −65 V
    "BC557B": ("pnp", 45, 100 * mA, 500 * mW, 200, 450, 2 * mA),  # §5 [S] BC557 row, group B
    "BC558B": ("pnp", 30, 100 * mA, 500 * mW, 200, 450, 2 * mA),  # §5 [S] BC557 row: BC558 −30 V
    "BC560C": ("pnp", 45, 100 * mA, 500 * mW, 420, 800, 2 * mA),  # §5 [S] BC559/BC560 row, groups as BC557
    "2N2222A": ("npn", 40, 600 * mA, 625 * mW, 100, 300, 150 * mA),  # §5 [S] 2N2222A row
    "2N5088": ("npn", 30, 50 * mA, 625 * mW, 300, 900, 100 * uA),  # §5 [S] 2N5088/2N5089 row
    "2N5089": ("npn", 25, 50 * mA, 625 * mW, 400, 1200, 100 * uA),  # §5 [S] 2N5088/2N5089 row
}


@pytest.mark.parametrize("name", ALL)
def test_ratings_and_gain_group_match_the_reference(catalog, name):
    polarity, vceo, ic_max, ptot, hmin, hmax, hic = DATASHEET[name]
    t = catalog[name]
    assert t.polarity == polarity
    assert t.vceo == pytest.approx(vceo, rel=1e-12)
    assert t.ic_max == pytest.approx(ic_max, rel=1e-12)
    assert t.ptot == pytest.approx(ptot, rel=1e-12)
    assert (t.hfe_min, t.hfe_max) == (hmin, hmax)
    assert t.hfe_ic == pytest.approx(hic, rel=1e-12)


# name: fT (Hz), fT test current (A), Cob (F), Cob test voltage (V), VCE(sat) (V)
DYNAMIC = {
    "2N3904": (300 * MHz, 10 * mA, 4.0 * pF, 5, 0.2),  # §5 [S] 2N3904 row (fT min, Cob max)
    "2N3906": (250 * MHz, 10 * mA, 4.5 * pF, 5, 0.25),  # §5 [S] 2N3906 row (magnitudes)
    "BC547B": (300 * MHz, 10 * mA, 3.5 * pF, 10, 0.25),  # §5 [S] BC547 row (typ fT and Cob, max VCE(sat))
    "2N2222A": (300 * MHz, 20 * mA, 8.0 * pF, 10, 0.3),  # §5 [S] 2N2222A row
    "2N5088": (50 * MHz, 0.5 * mA, 4.0 * pF, None, 0.5),  # §5 [S] 2N5088 row; Ccb test voltage not in §5
}


@pytest.mark.parametrize("name", sorted(DYNAMIC))
def test_ft_cob_and_saturation_match_the_reference(catalog, name):
    ft, ft_ic, cob, cob_vcb, vce_sat = DYNAMIC[name]
    t = catalog[name]
    assert t.ft == pytest.approx(ft, rel=1e-12)
    assert t.ft_ic == pytest.approx(ft_ic, rel=1e-12)
    assert t.cob == pytest.approx(cob, rel=1e-12)
    if cob_vcb is not None:
        assert t.cob_vcb == pytest.approx(cob_vcb, rel=1e-12)
    assert t.vce_sat == pytest.approx(vce_sat, rel=1e-12)


def test_bc547_vbe_is_the_datasheet_typical(catalog):
    t = catalog["BC547B"]
    assert t.vbe == pytest.approx(0.660, rel=1e-12)  # §5 [S]: VBE(on) 660 mV typ at 2 mA
    assert t.vbe_ic == pytest.approx(2 * mA, rel=1e-12)  # §5 [S]


@pytest.mark.parametrize(
    ("name", "va"),
    [
        ("BC547A", 111),  # §5 [D]: VA implied by h_oe at 2 mA, group A
        ("BC547B", 67),  # §5 [D]: group B
        ("BC547C", 33),  # §5 [D]: group C
        ("2N3904", 100),  # §5 [S, weak source]: measured 100–150 V, low end used
    ],
)
def test_early_voltages_follow_the_reference(catalog, name, va):
    assert catalog[name].early_voltage == pytest.approx(va, rel=1e-12)


def test_pnp_types_are_pnp_and_hold_positive_magnitudes(catalog):
    # §5 [S]: 2N3906, BC556–BC560 are PNP; the catalog writes magnitudes (its header says so).
    for name in ["2N3906", "BC556B", "BC557B", "BC558B", "BC560C"]:
        t = catalog[name]
        assert t.polarity == "pnp"
        assert min(t.vceo, t.ic_max, t.vbe, t.vbe_ic, t.vce_sat, t.early_voltage) > 0


# ---------------------------------------------------------------------------------------
# Derived models: facts of the trade (common practice, no source)

VT25 = thermal_voltage(T_REF)


def _depletion(c0: float, v: float, vj: float, mj: float, fc: float) -> float:
    """Junction depletion capacitance, SPICE form (written out here to check the model)."""
    if v < fc * vj:
        return c0 * (1 - v / vj) ** (-mj)
    return c0 / (1 - fc) ** (1 + mj) * (1 - fc * (1 + mj) + mj * v / vj)


@pytest.mark.parametrize("name", ALL)
def test_saturation_current_is_in_the_small_signal_range(catalog, name):
    m = catalog[name].model()
    assert 1e-16 < m.is_ < 1e-12  # common practice, no source: small-signal silicon IS


@pytest.mark.parametrize("name", ALL)
def test_model_vbe_at_one_milliamp_is_a_silicon_drop(catalog, name):
    m = catalog[name].model()
    vbe = VT25 * math.log(1e-3 / m.is_)
    assert 0.60 < vbe < 0.72  # common practice, no source: silicon VBE at 1 mA, 25 °C


@pytest.mark.parametrize("name", ALL)
def test_model_reproduces_the_datasheet_ft(catalog, name):
    t = catalog[name]
    m = t.model()
    gm = t.ft_ic / VT25
    vbe = VT25 * math.log(t.ft_ic / m.is_)
    c_pi = m.tf * gm + _depletion(m.cje, vbe, m.vje, m.mje, m.fc)
    c_mu = _depletion(m.cjc, -t.cob_vcb, m.vjc, m.mjc, m.fc)
    ft = gm / (2 * math.pi * (c_pi + c_mu))  # common practice, no source: fT = gm / 2π(Cπ + Cµ)
    assert ft == pytest.approx(t.ft, rel=0.02)


@pytest.mark.parametrize("name", ALL)
def test_model_cjc_gives_back_cob_at_its_test_voltage(catalog, name):
    t = catalog[name]
    m = t.model()
    assert _depletion(m.cjc, -t.cob_vcb, m.vjc, m.mjc, m.fc) == pytest.approx(t.cob, rel=1e-9)


@pytest.mark.parametrize("name", ALL)
def test_model_is_sane(catalog, name):
    t = catalog[name]
    m = t.model()
    assert m.polarity == DATASHEET[name][0]  # §5 [S]
    assert m.va > 0  # common practice, no source
    assert m.beta_min == t.hfe_min and m.beta_max == t.hfe_max
    assert t.hfe_min <= m.beta <= t.hfe_max
    assert m.tf > 1e-11  # the floor of the derivation is not what sets fT
    assert m.name == name


def test_beta_without_typical_is_the_geometric_mean(catalog):
    # The 2N3904 entry gives no typical hFE; the loader documents sqrt(min·max).
    assert catalog["2N3904"].model().beta == pytest.approx(math.sqrt(100 * 300), rel=1e-12)


# ---------------------------------------------------------------------------------------
# Ptot derating: common practice, no source — linear derating from 25 °C to Tj max


def test_ptot_at_25_celsius_is_the_rating(catalog):
    t = catalog["2N3904"]
    assert t.ptot_at(298.15) == t.ptot
    assert t.ptot_at(273.15) == t.ptot  # below 25 °C the rating holds (common practice, no source)


def test_ptot_at_tj_max_is_zero(catalog):
    t = catalog["2N3904"]
    assert t.tj_max == pytest.approx(423.15)  # 150 °C: typical datasheet value from memory
    assert t.ptot_at(423.15) == pytest.approx(0.0, abs=1e-15)
    assert t.ptot_at(450.0) == 0.0


def test_ptot_halfway_is_half(catalog):
    t = catalog["2N3904"]
    assert t.ptot_at((298.15 + 423.15) / 2) == pytest.approx(t.ptot / 2, rel=1e-12)


@given(st.floats(min_value=298.15, max_value=423.15))
def test_ptot_derates_linearly(ambient):
    t = transistor_types()["BC547B"]
    expected = t.ptot * (423.15 - ambient) / (423.15 - 298.15)
    assert t.ptot_at(ambient) == pytest.approx(expected, rel=1e-9, abs=1e-12)


# ---------------------------------------------------------------------------------------
# SPICE card


def test_spice_card_names_the_model_parameters(catalog):
    card = catalog["2N3904"].model().spice_card("Q2N3904")
    assert card.startswith(".model Q2N3904 NPN (")
    for key in ("IS=", "BF=", "VAF=", "BR=0.74"):
        assert key in card
    assert re.search(r"\bTNOM=25[ )]", card)


def test_spice_card_of_a_pnp_says_pnp(catalog):
    assert " PNP " in catalog["2N3906"].model().spice_card("Q2N3906")


def test_spice_card_from_an_inline_model():
    card = BjtModel(polarity="npn", is_=1e-14, beta=200, va=100).spice_card("QX")
    assert "IS=1e-14" in card and "BF=200" in card and "VAF=100" in card and "TNOM=25" in card


# ---------------------------------------------------------------------------------------
# Malformed catalog files

GOOD = """\
T1:
  polarity: npn
  package: TO-92
  pinout: EBC
  hfe: {min: 100, max: 300, at_ic: 10 mA}
  vbe: {value: 0.65 V, at_ic: 1 mA}
  early_voltage: 100 V
  vce_sat: {value: 0.2 V, at_ic: 10 mA}
  vceo: 40 V
  ic_max: 200 mA
  ptot: 625 mW
  ft: {value: 300 MHz, at_ic: 10 mA}
  cob: {value: 4 pF, at_vcb: 5 V}
  source: test entry
"""


def _write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "bad.yaml"
    p.write_text(text, encoding="utf-8")
    return p


def _line_of(text: str, needle: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), 1) if needle in line)


def _problems(tmp_path: Path, text: str):
    p = _write(tmp_path, text)
    with pytest.raises(FileProblems) as info:
        load_transistors(p)
    for prob in info.value.problems:
        assert Path(prob.file).resolve() == p.resolve()
    assert "bad.yaml" in str(info.value)
    return info.value.problems


def _one(problems, fieldpath: str):
    hits = [p for p in problems if p.field == fieldpath]
    assert len(hits) == 1, problems
    return hits[0]


def test_the_good_entry_loads(tmp_path):
    t = load_transistors(_write(tmp_path, GOOD))["T1"]
    assert t.polarity == "npn" and t.pinout == "EBC"
    assert t.cib is None and t.tj_max == pytest.approx(423.15) and t.beta_reverse == 1.0


def test_missing_polarity(tmp_path):
    text = GOOD.replace("  polarity: npn\n", "")
    problems = _problems(tmp_path, text)
    p = _one(problems, "T1.polarity")
    assert "missing" in p.message
    assert p.line in (1, 2)  # the entry's own position: its name or its first field
    assert len(problems) == 1


def test_misspelt_polarity_suggests_npn(tmp_path):
    text = GOOD.replace("polarity: npn", "polarity: nnp")
    p = _one(_problems(tmp_path, text), "T1.polarity")
    assert p.line == _line_of(text, "polarity")
    assert "'nnp'" in p.message and "did you mean" in p.message and "'npn'" in p.message


def test_upper_case_polarity_gets_a_suggestion(tmp_path):
    p = _one(_problems(tmp_path, GOOD.replace("polarity: npn", "polarity: NPN")), "T1.polarity")
    assert "did you mean 'npn'?" in p.message


def test_hfe_min_above_max(tmp_path):
    text = GOOD.replace("min: 100, max: 300", "min: 300, max: 100")
    p = _one(_problems(tmp_path, text), "T1.hfe")
    assert p.line == _line_of(text, "hfe:")
    assert "300" in p.message and "100" in p.message and "above" in p.message


def test_hfe_typ_outside_the_group(tmp_path):
    text = GOOD.replace("min: 100, max: 300", "min: 100, typ: 400, max: 300")
    p = _one(_problems(tmp_path, text), "T1.hfe.typ")
    assert "outside" in p.message


def test_value_without_unit(tmp_path):
    text = GOOD.replace("ptot: 625 mW", "ptot: 625")
    p = _one(_problems(tmp_path, text), "T1.ptot")
    assert p.line == _line_of(text, "ptot:")
    assert "unit is missing" in p.message


def test_unknown_field_with_did_you_mean(tmp_path):
    text = GOOD.replace("early_voltage:", "erly_voltage:")
    problems = _problems(tmp_path, text)
    p = _one(problems, "T1.erly_voltage")
    assert p.line == _line_of(text, "erly_voltage")
    assert "unknown field" in p.message and "did you mean 'early_voltage'?" in p.message
    assert "missing" in _one(problems, "T1.early_voltage").message


def test_missing_test_current_is_a_problem_not_a_crash(tmp_path):
    text = GOOD.replace("vbe: {value: 0.65 V, at_ic: 1 mA}", "vbe: {value: 0.65 V}")
    p = _one(_problems(tmp_path, text), "T1.vbe.at_ic")
    assert p.line == _line_of(text, "vbe:") and "missing" in p.message


def test_missing_text_field_is_a_problem_not_a_crash(tmp_path):
    p = _one(_problems(tmp_path, GOOD.replace("  package: TO-92\n", "")), "T1.package")
    assert "missing" in p.message


@pytest.mark.parametrize(
    ("old", "new", "fieldpath"),
    [
        ("ft: {value: 300 MHz", "ft: {value: 0 MHz", "T1.ft.value"),
        ("early_voltage: 100 V", "early_voltage: 0 V", "T1.early_voltage"),
        ("ptot: 625 mW", "ptot: 0 mW", "T1.ptot"),
        ("vbe: {value: 0.65 V, at_ic: 1 mA}", "vbe: {value: 0.65 V, at_ic: 0 mA}", "T1.vbe.at_ic"),
    ],
)
def test_figures_the_model_needs_must_be_above_zero(tmp_path, old, new, fieldpath):
    text = GOOD.replace(old, new)
    assert text != GOOD
    p = _one(_problems(tmp_path, text), fieldpath)
    assert "above zero" in p.message


def test_pinout_must_name_each_lead_once(tmp_path):
    text = GOOD.replace("pinout: EBC", "pinout: ECC")
    p = _one(_problems(tmp_path, text), "T1.pinout")
    assert p.line == _line_of(text, "pinout") and "E, B and C" in p.message


def test_every_problem_is_reported_together(tmp_path):
    text = GOOD.replace("polarity: npn", "polarity: nnp").replace("ptot: 625 mW", "ptot: 625")
    fields = {p.field for p in _problems(tmp_path, text)}
    assert fields == {"T1.polarity", "T1.ptot"}


def test_pnp_figures_written_negative_read_as_magnitudes(tmp_path):
    text = GOOD.replace("polarity: npn", "polarity: pnp").replace("vceo: 40 V", "vceo: -40 V")
    t = load_transistors(_write(tmp_path, text))["T1"]
    assert t.polarity == "pnp" and t.vceo == 40.0
