"""Unit parsing and conversion, checked against published definitions and scipy.constants (CODATA)."""

import numpy as np
import pytest
import scipy.constants as sc

from phasewake.core.errors import UnitError
from phasewake.core.units import KB_KJ_PER_MOL_K, parse_unit, split_header, to_internal


def test_kcal_per_mol_is_exactly_4184_J():
    # Thermochemical calorie = 4.184 J exactly (NIST SP 811, 2008 edition, appendix B.8).
    assert parse_unit("kcal/mol").factor == 4.184
    assert parse_unit("kilocalories_per_mole").factor == 4.184
    assert parse_unit("kcal mol-1").internal == "kJ/mol"


def test_electronvolt_to_kJ_per_mol():
    # CODATA: 1 eV = e * N_A J/mol = 96.485 332 12... kJ/mol (computed from scipy.constants, CODATA 2018).
    expected = sc.electron_volt * sc.Avogadro / 1000.0
    assert parse_unit("eV").factor == pytest.approx(expected, rel=1e-15)
    assert parse_unit("eV").factor == pytest.approx(96.485, abs=5e-4)  # CODATA value, rounded, from memory


def test_femtosecond_and_angstrom():
    # SI prefixes (BIPM SI brochure): 1 fs = 1e-3 ps; 1 Angstrom = 0.1 nm.
    assert parse_unit("fs").factor == 1e-3
    assert parse_unit("time (fs)".split("(")[1][:-1]).factor == 1e-3
    assert parse_unit("Å").factor == pytest.approx(0.1, rel=1e-15)
    assert parse_unit("angstroms").factor == pytest.approx(0.1, rel=1e-15)


def test_molar_boltzmann_constant():
    # R/1000 from scipy.constants (CODATA 2018, exact since SI 2019): 0.00831446261815324 kJ/(mol K).
    assert KB_KJ_PER_MOL_K == sc.R / 1000.0
    assert KB_KJ_PER_MOL_K == pytest.approx(0.00831446261815324, rel=1e-15)


def test_written_out_constants_are_scipys():
    # core/units.py writes the CODATA values out (importing scipy.constants costs ~0.1 s at start-up)
    from phasewake.core import units

    assert units.AVOGADRO_PER_MOL == sc.Avogadro and units.BOLTZMANN_J_PER_K == sc.Boltzmann
    assert units.ELEMENTARY_CHARGE_C == sc.elementary_charge
    assert units.ATOMIC_MASS_KG == pytest.approx(sc.atomic_mass, rel=1e-9)  # CODATA 2022 (2018: 3e-10 off)
    assert units.HARTREE_J == pytest.approx(sc.physical_constants["Hartree energy"][0], rel=1e-9)


@pytest.mark.parametrize(
    ("text", "factor", "internal"),
    [
        # H5MD 1.1 unit strings (de Buyl, Colberg, Hoefling 2014, H5MD units module): factors with signed powers
        ("nm ps-1", 1.0, "nm/ps"),
        ("kJ mol-1", 1.0, "kJ/mol"),
        ("10+3 m", 1e12, "nm"),  # leading number 10+3 = 10^3 (H5MD units convention), 1 m = 1e9 nm
        ("nm^2 ps^-1", 1.0, "nm^2/ps"),
        ("kJ mol-1 nm-1", 1.0, "kJ/(mol nm)"),
        # mdtraj HDF5 unit attributes (mdtraj's formats/hdf5.py conventions)
        ("nanometers", 1.0, "nm"),
        ("picoseconds", 1.0, "ps"),
        ("nanometers/picosecond", 1.0, "nm/ps"),
        ("kilojoules_per_mole", 1.0, "kJ/mol"),
        ("kelvin", 1.0, "K"),
        # OpenMM unit names
        ("nanometer**3", 1.0, "nm^3"),
        ("gram/(centimeter**3)", 1.0, "g/cm^3"),
        ("g/mL", 1.0, "g/cm^3"),
        # pressure: 1 atm = 101325 Pa exactly, 1 bar = 1e5 Pa (SI brochure / NIST SP 811)
        ("atm", 1.01325, "bar"),
        ("kPa", 0.01, "bar"),
        ("A/ps", 0.1, "nm/ps"),
        ("J/mol K", 1e-3, "kJ/(mol K)"),
    ],
)
def test_unit_strings(text, factor, internal):
    u = parse_unit(text)
    assert u.internal == internal
    assert u.factor == pytest.approx(factor, rel=1e-12)


def test_hartree_uses_codata():
    # Hartree energy from scipy.constants (CODATA 2018): 2625.4996... kJ/mol.
    expected = sc.physical_constants["Hartree energy"][0] * sc.Avogadro / 1000
    assert parse_unit("Eh").factor == pytest.approx(expected, rel=1e-14)


def test_gram_per_mol_equals_dalton_within_codata():
    # Since SI 2019 the molar mass constant M_u = N_A * m_u is 0.99999999965(30) g/mol (CODATA 2018).
    assert parse_unit("g/mol").factor == pytest.approx(1.0, abs=2e-9)
    assert parse_unit("g/mol").internal == "amu"


@pytest.mark.parametrize("text", ["", None, "   ", "furlongs", "kJ/fortnight", "degC", "nm^", "(nm"])
def test_unknown_or_missing_units_raise_naming_them(text):
    with pytest.raises(UnitError) as info:
        parse_unit(text)
    if text and text.strip() and text not in ("nm^", "(nm"):
        assert text.split("/")[-1].split("^")[0] in str(info.value) or "degC" in str(info.value)


def test_expect_dimension():
    with pytest.raises(UnitError, match="energy"):
        parse_unit("nm", expect="energy")
    assert parse_unit("kcal/mol", expect="energy").dimension == "energy"


def test_to_internal_converts_arrays():
    vals, unit = to_internal(np.array([1.0, 2.0]), "kcal/mol")
    np.testing.assert_array_equal(vals, [4.184, 8.368])
    assert unit == "kJ/mol"


@pytest.mark.parametrize(
    ("header", "name", "unit"),
    [
        ("Potential Energy (kcal/mol)", "Potential Energy", "kcal/mol"),
        ("E_tot [eV]", "E_tot", "eV"),
        ("time (fs)", "time", "fs"),
        ('"Box Volume (nm^3)"', "Box Volume", "nm^3"),
        ("#Step", "Step", None),
        ("density (g/(cm^3))", "density", "g/(cm^3)"),
        ("temperature", "temperature", None),
    ],
)
def test_split_header(header, name, unit):
    assert split_header(header) == (name, unit)


@pytest.mark.parametrize("text", ["0", "0/0", "1/0 nm", "10+999 m", "m^999", "m^0", "-2 nm"])
def test_degenerate_factors_and_powers_are_errors(text):
    # a conversion factor must be positive and finite (found by the fuzz tests in tests/robustness)
    with pytest.raises(UnitError):
        parse_unit(text)


def test_surface_tension_in_bar_nm():
    # GROMACS writes #Surf*SurfTen in bar nm; 1 bar nm = 1e5 Pa x 1e-9 m = 1e-4 N/m = 0.1 mN/m (SI definitions)
    u = parse_unit("bar nm")
    assert (u.internal, u.dimension, u.factor) == ("bar nm", "surface tension", 1.0)
    assert parse_unit("J/m^2").factor == pytest.approx(1e4, rel=1e-12)  # 1 J/m^2 = 1 N/m
