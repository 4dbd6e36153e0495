"""The reference values in beltkit.constants against their published sources."""

import math
from pathlib import Path

import numpy as np
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
    # IGRF-14 (IAGA): reference radius a = 6371.2 km.
    assert C.R_E_KM == 6371.2
    assert C.R_E_M == 6371.2e3


def test_dipole_coefficients_match_the_shipped_igrf14_table():
    # The IAGA IGRF-14 table (DGRF 2020.0): g10, g11, h11.
    g10, g11, h11 = _first_degree(C.B0_EPOCH)
    assert (C.G10_NT, C.G11_NT, C.H11_NT) == (g10, g11, h11)


def test_b0_is_the_first_degree_field_magnitude():
    # B0 = sqrt(g10^2 + g11^2 + h11^2); about 29,800 nT in 2020 (common practice).
    expect = math.sqrt(29403.41**2 + 1451.37**2 + 4653.35**2)
    assert math.isclose(C.B0_NT, expect, rel_tol=1e-12)
    assert 29700 < C.B0_NT < 29900


def test_energy_units_follow_codata():
    # scipy.constants (CODATA): 1 eV = e joules.
    assert C.KEV_J == 1e3 * sc.e
    assert C.MEV_J == 1e6 * sc.e
    assert np.isclose(C.GAUSS_PER_NT * 1e5, 1.0)
