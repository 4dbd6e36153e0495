"""The one unit parser (beltkit.units): UDUNITS grammar plus the spellings of CDF files.

Expected factors are definitions: the SI prefixes (k = 1e3, M = 1e6, n = 1e-9),
1 gauss = 1e-4 T (CGS-SI definition), 1 rad = 180/pi degree, the IGRF
reference radius 6371.2 km (IAGA, IGRF-14 release notes). The CDF markup is
the IDL text-formatting code set (!E/!U superscript, !I subscript, !N normal;
from memory, checked against unit strings seen in ISTP files).
"""

import math

import numpy as np
import pytest
import xarray as xr

from beltkit import dipole
from beltkit.errors import PhysicsError
from beltkit.units import (
    conversion_factor,
    l_shell_factor,
    normalize_units,
    parse_units,
    same_kind,
)

FLUX = "cm-2 s-1 sr-1 keV-1"


@pytest.mark.parametrize(("have", "want", "factor"), [
    ("MeV", "keV", 1e3),                                   # SI prefixes
    ("eV", "keV", 1e-3),
    ("GeV", "keV", 1e6),
    ("gauss", "nT", 1e5),                                  # 1 G = 1e-4 T
    ("G", "nT", 1e5),
    ("T", "nT", 1e9),
    ("rad", "degree", 180.0 / math.pi),
    ("radians", "degree", 180.0 / math.pi),
    ("Degrees", "degree", 1.0),
    ("deg", "degree", 1.0),
    ("m", "km", 1e-3),
    ("R_E", "km", 6371.2),                                 # IGRF reference radius
    ("Re", "km", 6371.2),
    ("R!IE!N", "km", 6371.2),
    ("hours", "hour", 1.0),
    ("h", "hour", 1.0),
    ("min", "s", 60.0),
    ("cm-2 s-1 sr-1 MeV-1", FLUX, 1e-3),
    ("1/(cm2 s sr MeV)", FLUX, 1e-3),
    ("cm^-2 s^-1 sr^-1 keV^-1", FLUX, 1.0),
    ("cm**-2 s**-1 sr**-1 keV**-1", FLUX, 1.0),
    ("#/cm2/s/sr/keV", FLUX, 1.0),
    ("m-2 s-1 sr-1 keV-1", FLUX, 1e-4),
    ("cm!E-2!N s!E-1!N sr!E-1!N keV!E-1!N", FLUX, 1.0),
    ("cm!E-2!Ns!E-1!Nsr!E-1!NMeV!E-1!N", FLUX, 1e-3),
    ("1/(cm2 s ster keV)", FLUX, 1.0),
])
def test_conversion_factors_are_the_definitions(have, want, factor):
    assert conversion_factor(have, want) == pytest.approx(factor, rel=1e-14)


@pytest.mark.parametrize(("have", "want"), [
    ("1", "degree"),                      # a bare number is not an angle
    ("degree", "1"),
    ("cm-2 s-1 keV-1", FLUX),             # integrated is not directional flux
    (FLUX, "cm-2 s-1 keV-1"),
    ("counts", FLUX),
    ("furlong", "keV"),
    ("degC", "K"),                        # offset units are not a scale factor
    ("seconds since 1970-01-01", "s"),    # a time reference is not a unit
    ("not a unit", "1"),
])
def test_different_kinds_do_not_convert(have, want):
    assert conversion_factor(have, want) is None


def test_angles_are_kept_apart_from_numbers():
    # UDUNITS treats the radian as dimensionless; beltkit does not
    assert parse_units("degree").is_convertible(parse_units("1"))
    assert not same_kind("degree", "1")
    assert same_kind("rad", "arc_degree")


@pytest.mark.parametrize(("text", "normal"), [
    ("cm!E-2!N s!E-1!N sr!E-1!N keV!E-1!N", "cm-2 s-1 sr-1 keV-1"),
    ("R!IE!N", "6371.2 km"),
    ("", "1"),
    ("unitless", "1"),
    ("deg", "degree"),
    ("nT", "nT"),
])
def test_normalized_spellings(text, normal):
    assert normalize_units(text) == normal


@pytest.mark.parametrize(("units", "factor"), [
    ("1", 1.0), ("", 1.0), ("R_E", 1.0), ("Re", 1.0), ("R!IE!N", 1.0), ("Earth radii", 1.0),
    ("km", None), ("furlong", None), ("degree", None),
])
def test_l_shell_units(units, factor):
    assert l_shell_factor(units) == factor


def test_dataarray_arguments_convert_through_the_parser():
    # 4 R_E (in Earth radii) and a 100 km altitude given in metres and in R_E
    L = xr.DataArray([4.0], dims="time", attrs={"units": "R!IE!N"})
    got = dipole.bounce_loss_cone(L, altitude_km=100.0)
    assert float(got[0]) == pytest.approx(dipole.bounce_loss_cone(4.0), rel=1e-14)
    alt = xr.DataArray([100e3], dims="time", attrs={"units": "m"})
    assert float(dipole.bounce_loss_cone(4.0, altitude_km=alt)[0]) == pytest.approx(
        dipole.bounce_loss_cone(4.0), rel=1e-14)
    with pytest.raises(PhysicsError, match="furlong"):
        dipole.bounce_loss_cone(xr.DataArray([4.0], dims="time", attrs={"units": "furlong"}))
    lat = xr.DataArray(np.radians([20.0]), dims="time", attrs={"units": "radians"})
    assert float(dipole.local_loss_cone(4.0, lat)[0]) == pytest.approx(
        dipole.local_loss_cone(4.0, 20.0), rel=1e-12)
