r"""Physical constants and reference values that :mod:`scipy.constants` does not hold.

Everything else (speed of light, elementary charge, particle masses) is taken
from :mod:`scipy.constants` (CODATA) where it is used; nothing here retypes a
CODATA value.

Attributes
----------
R_E_KM : float
    Earth reference radius, 6371.2 km: the reference radius *a* of the
    International Geomagnetic Reference Field (IAGA, IGRF-14). Used as "R_E"
    throughout beltkit (L-shells, arc lengths, altitudes).
R_E_M : float
    The same in metres.
B0_EPOCH : float
    Decimal year of the Gauss coefficients that define the default dipole
    moment, 2020.0 (a definitive epoch of IGRF-14).
G10_NT, G11_NT, H11_NT : float
    IGRF-14 first-degree Gauss coefficients at ``B0_EPOCH`` in nT, as printed
    in the standard table shipped at ``beltkit/field/data/igrf14coeffs.shc``
    (a test checks the two agree).
B0_NT : float
    Default equatorial surface field of the centred dipole,
    :math:`B_0 = \sqrt{g_{10}^2 + g_{11}^2 + h_{11}^2}` (about 29,804 nT).
    This is the single place where the default ``b0_nt`` of every function
    in beltkit is defined.
NT : float
    One nanotesla in tesla.
GAUSS_PER_NT : float
    Gauss per nanotesla (1 G = 1e-4 T = 1e5 nT).
KEV_J : float
    One kiloelectronvolt in joules.
MEV_J : float
    One megaelectronvolt in joules.
"""

import math

import scipy.constants as _sc

__all__ = [
    "B0_EPOCH",
    "B0_NT",
    "G10_NT",
    "G11_NT",
    "GAUSS_PER_NT",
    "H11_NT",
    "KEV_J",
    "MEV_J",
    "NT",
    "R_E_KM",
    "R_E_M",
]

R_E_KM = 6371.2
R_E_M = R_E_KM * 1e3

B0_EPOCH = 2020.0
G10_NT = -29403.41
G11_NT = -1451.37
H11_NT = 4653.35
B0_NT = math.sqrt(G10_NT**2 + G11_NT**2 + H11_NT**2)

NT = _sc.nano
GAUSS_PER_NT = 1e-5
KEV_J = _sc.kilo * _sc.electron_volt
MEV_J = _sc.mega * _sc.electron_volt
