r"""Unit strings: one parser for every layer, on the UDUNITS-2 grammar of the CF conventions.

Every unit attribute beltkit reads (a DataArray argument, a variable of a flux
file, a mapping's ``[units]`` table) goes through :func:`parse_units` and
:func:`conversion_factor`. Parsing and conversion are done by ``cf-units``
(the maintained Python interface to Unidata's UDUNITS-2 library, whose wheels
bundle the C library), so every spelling UDUNITS knows is understood
(``"cm-2 s-1 sr-1 MeV-1"``, ``"1/(cm^2 s sr keV)"``, ``"cm**-2.s**-1"``,
``"radians"``, ``"Degrees"``, ``"hours"``). Before parsing, a few spellings
common in space-physics files are normalised:

* the exponent and subscript markup of CDF files (IDL text codes): ``!E`` or
  ``!U`` starts a superscript and ``!I`` a subscript, ``!N`` returns to normal
  text: ``"cm!E-2!N s!E-1!N sr!E-1!N keV!E-1!N"`` is ``"cm-2 s-1 sr-1 keV-1"``
  and ``"R!IE!N"`` is ``"R_E"``;
* Earth radii (``R_E``, ``Re``, ``RE``, ``Earth radii``, ``earth_radius``):
  :data:`beltkit.constants.R_E_KM` km, the IGRF reference radius;
* ``deg`` (degree), ``G`` (gauss), ``ster`` (steradian), ``#`` (a count);
* an empty string, ``unitless``, ``dimensionless`` and ``none``: ``"1"``.

Two units convert into each other only when they have the same dimensions
*including* angles: UDUNITS treats the radian and the steradian as
dimensionless, so an angle in ``"1"`` would otherwise pass as radians and an
integrated flux as a directional one. beltkit compares the base-unit
signature of both (``rad`` kept as its own base unit) and refuses the rest.
"""

from __future__ import annotations

import functools
import re

import cf_units

from .constants import R_E_KM

__all__ = [
    "FLUX_UNITS",
    "K_UNITS",
    "MU_UNITS",
    "conversion_factor",
    "l_shell_factor",
    "normalize_units",
    "parse_units",
    "same_kind",
]

#: Canonical unit of differential directional flux.
FLUX_UNITS = "cm-2 s-1 sr-1 keV-1"
#: Unit of the first adiabatic invariant mu (the trade's MeV/G, in UDUNITS spelling).
MU_UNITS = "MeV gauss-1"
#: Unit of the second invariant K, G^(1/2) R_E. UDUNITS has no fractional powers, so
#: files state it in ``long_name`` and ``beltkit_units`` instead of ``units``.
K_UNITS = "G0.5 R_E"

_SUPERSCRIPT = re.compile(r"!(?:E|U)(.*?)!N")
_SUBSCRIPT = re.compile(r"!I(.*?)!N")
_EARTH_RADII = re.compile(
    r"(?<![A-Za-z_])(?:R_E|R_e|Re|RE|R_earth|earth_radius|earth_radii|Earth[ _]radii|"
    r"Earth[ _]radius)(?![A-Za-z_])"
)
_WORDS = {
    "deg": "degree", "Deg": "degree", "DEG": "degree", "degs": "degree",
    "G": "gauss", "ster": "sr", "#": "1",
}
_WORD = re.compile(r"(?<![A-Za-z_#])(deg|Deg|DEG|degs|G|ster|#)(?![A-Za-z_])")
_DIMENSIONLESS = {"", "unitless", "dimensionless", "none", "None", "n/a", "-"}
_LEADING_NUMBER = re.compile(r"^\s*[-+0-9.eE]+\s*(?=[A-Za-z])")


def normalize_units(text) -> str:
    """Rewrite space-physics spellings of a unit string into the UDUNITS grammar.

    Parameters
    ----------
    text : str
        A unit attribute as found in a file, e.g. ``"cm!E-2!N s!E-1!N"``.

    Returns
    -------
    str
        The same unit in UDUNITS spelling (see the module notes).

    Examples
    --------
    >>> normalize_units("cm!E-2!N s!E-1!N sr!E-1!N keV!E-1!N")
    'cm-2 s-1 sr-1 keV-1'
    >>> normalize_units("R!IE!N")
    '6371.2 km'
    """
    s = str(text).strip()
    if s in _DIMENSIONLESS:
        return "1"
    s = _SUBSCRIPT.sub(lambda m: "_" + m.group(1), s)
    s = _SUPERSCRIPT.sub(lambda m: m.group(1), s)
    s = s.replace("!N", "")
    s = _EARTH_RADII.sub(f"({R_E_KM!r} km)", s)
    s = _WORD.sub(lambda m: _WORDS[m.group(1)], s)
    s = s.strip()
    if s.startswith("(") and s.endswith(")") and s.count("(") == 1:
        s = s[1:-1]
    return s


@functools.lru_cache(maxsize=1024)
def parse_units(text):
    """Return the :class:`cf_units.Unit` of a unit string, or None when it is not a unit.

    Parameters
    ----------
    text : str
        A unit attribute (see :func:`normalize_units` for the spellings accepted
        beyond the UDUNITS grammar).

    Returns
    -------
    cf_units.Unit or None
        None for strings UDUNITS cannot parse, for the "unknown" and "no_unit"
        units, and for time references (``"seconds since ..."``), which are
        not plain units.
    """
    s = normalize_units(text)
    try:
        unit = cf_units.Unit(s)
    except (ValueError, TypeError):
        return None
    if unit.is_unknown() or unit.is_no_unit() or unit.is_time_reference():
        return None
    return unit


def _signature(unit) -> str:
    """Return the base-unit part of a unit's definition (dimensions, radians included)."""
    return _LEADING_NUMBER.sub("", unit.definition).strip() or "1"


def same_kind(have, want) -> bool:
    """Whether two unit strings measure the same kind of quantity (angles kept apart).

    Parameters
    ----------
    have, want : str
        Unit strings.

    Returns
    -------
    bool
        True when both parse and have the same base-unit signature, so that
        degrees and ``"1"``, or a directional and an integrated flux, differ.
    """
    a, b = parse_units(have), parse_units(want)
    return a is not None and b is not None and _signature(a) == _signature(b)


@functools.lru_cache(maxsize=1024)
def conversion_factor(have, want):
    """Factor that converts values in unit ``have`` to unit ``want``, or None.

    Parameters
    ----------
    have : str
        The unit the values are in (any spelling :func:`parse_units` accepts).
    want : str
        The unit wanted.

    Returns
    -------
    float or None
        Multiply values in ``have`` by this to express them in ``want``; None
        when either string is not a unit or the two are of different kinds
        (:func:`same_kind`). Units with an offset (``degC``) are not scalar
        conversions and give None.

    Examples
    --------
    >>> conversion_factor("cm!E-2!N s!E-1!N sr!E-1!N MeV!E-1!N", "cm-2 s-1 sr-1 keV-1")
    0.001
    >>> conversion_factor("1", "degree") is None
    True
    """
    a, b = parse_units(have), parse_units(want)
    if a is None or b is None or _signature(a) != _signature(b):
        return None
    zero = float(a.convert(0.0, b))
    if zero != 0.0:
        return None
    # UDUNITS works through SI in double precision: 1 MeV -> keV comes back as
    # 999.9999999999999. The factors between real units are short decimals,
    # so keep 15 significant digits.
    return float(f"{float(a.convert(1.0, b)):.15g}")


def l_shell_factor(units):
    """Factor that converts an L-value's unit to the dimensionless L, or None.

    L is a distance in Earth radii, so files write its unit as ``"1"`` (or
    empty) or as Earth radii (``"R_E"``, ``"Re"``, ``"R!IE!N"``); both mean the
    same number. Any other unit, a length in km included, is not an L.

    Parameters
    ----------
    units : str
        The unit attribute of an L variable.

    Returns
    -------
    float or None
        1.0 for Earth radii, the dimensionless factor for ``"1"``-like units,
        None otherwise.
    """
    if conversion_factor(units, "R_E") == 1.0:
        return 1.0
    return conversion_factor(units, "1")
