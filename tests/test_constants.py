"""The reference values in beltkit.constants against their published sources."""

import math
from pathlib import Path

import scipy.constants as sc

import beltkit
from beltkit import constants as C

SHC = Path(beltkit.__file__).parent / "field" / "data" / "igrf14coeffs.shc"


def _first_degree(epoch):
    """Read g10, g11, h11 at `epoch` straight from the shipped IAGA table."""
    lines = [ln for ln in SHC.read_text().splitlines() if not ln.startswith("#")]
    epochs = [float(x) for x in lines[1].split()]
    col = epochs.index(epoch)
    rows = {}
    for ln in lines[2:5]:
        n, m, *vals = ln.split()
        rows[(int(n), int(m))] = float(vals[col])
    return rows[(1, 0)], rows[(1, 1)], rows[(1, -1)]


def test_reference_radius_is_the_igrf_one():
    # the IGRF reference radius as ppigrf (package index) defines it for its synthesis
    from ppigrf import ppigrf

    assert C.R_E_KM == ppigrf.RE
    assert C.R_E_M == ppigrf.RE * sc.kilo


def test_dipole_coefficients_match_the_shipped_igrf14_table():
    # The IAGA IGRF-14 table (DGRF 2020.0): g10, g11, h11.
    g10, g11, h11 = _first_degree(C.B0_EPOCH)
    assert (C.G10_NT, C.G11_NT, C.H11_NT) == (g10, g11, h11)


def test_b0_is_the_first_degree_field_magnitude():
    # B0 = sqrt(g10^2 + g11^2 + h11^2) of the IGRF-14 coefficients as ppigrf (package index)
    # reads them from its own copy of the IAGA table; about 29,800 nT in 2020 (common practice)
    from ppigrf import ppigrf

    g, h = ppigrf.read_shc(ppigrf.shc_fn_igrf14)
    row = list(g.index.year).index(int(C.B0_EPOCH))  # the table's epochs fall on 1 January
    g10, g11, h11 = g.iloc[row][(1, 0)], g.iloc[row][(1, 1)], h.iloc[row][(1, 1)]
    assert math.isclose(C.B0_NT, math.sqrt(g10**2 + g11**2 + h11**2), rel_tol=1e-12)
    assert 29700 < C.B0_NT < 29900


def test_energy_units_follow_codata():
    # scipy.constants (CODATA): 1 eV = e joules.
    assert C.KEV_J == 1e3 * sc.e
    assert C.MEV_J == 1e6 * sc.e
    # astropy.units: 1 nT in gauss
    import astropy.units as u

    assert math.isclose(C.GAUSS_PER_NT, (1 * u.nT).to_value(u.G), rel_tol=1e-15)
