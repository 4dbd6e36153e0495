"""The motion and loss-cone tables that ``beltkit motion`` and ``beltkit losscone`` print.

Each function takes the command's parsed options and returns the text to
print; options that do not fit together raise
:class:`beltkit.errors.OptionError`, whose message names the command-line
options.
"""

from __future__ import annotations

import json
import math

from .argtypes import DEFAULT_HEIGHT_KM, TIME_EXAMPLE
from .errors import OptionError

__all__ = ["check_species", "losscone_text", "motion_text"]


def check_species(name):
    """Return the named species, or refuse an unknown name (naming ``--species``)."""
    from .errors import PhysicsError
    from .particles import get_species

    try:
        return get_species(name)
    except PhysicsError:
        raise OptionError(f"--species: unknown species {name!r}; use electron, proton, alpha "
                          f"or oxygen+") from None


def _check_line_reaches(L, h) -> None:
    """Refuse an L whose dipole line does not reach the footpoint altitude h (km)."""
    from .constants import R_E_KM

    need = 1.0 + h / R_E_KM
    if L < need:
        raise OptionError(
            f"--L {L:g}: the field line's apex ({(L - 1.0) * R_E_KM:.1f} km) lies below the "
            f"footpoint altitude --footpoint-km {h:g}, so every particle on it is lost; give "
            f"--L >= {need:.6g} or a lower --footpoint-km")



def _plain_value(v):
    if isinstance(v, (str, bool, list)):
        return v
    return float(v)


def _table(rows, as_json: bool, notes=()) -> str:
    """Rows of (key, label, value, unit) as an aligned table or a JSON object.

    `notes` are printed as ``note: ...`` lines above the table; in JSON they
    are the list under the key ``notes``.
    """
    if as_json:
        obj = {key: {"value": value, "unit": unit} for key, _, value, unit in rows}
        obj["notes"] = {"value": list(notes), "unit": ""}
        return json.dumps(obj, indent=2)
    cells = [(label, _number(value), unit) for _, label, value, unit in rows]
    w0 = max(len(c[0]) for c in cells)
    w1 = max(len(c[1]) for c in cells)
    lines = [f"note: {n}" for n in notes]
    lines += [f"{a.ljust(w0)}  {b.rjust(w1)}  {c}".rstrip() for a, b, c in cells]
    return "\n".join(lines)


def _number(value) -> str:
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, str):
        return value
    if value != value:  # NaN
        return "nan"
    if value == 0 or 1e-3 <= abs(value) < 1e6:
        return f"{value:.6g}"
    return f"{value:.4e}"


def motion_text(args) -> str:
    """Return the ``beltkit motion`` table for parsed options (text, or JSON with ``--json``).

    Gyration at the equator (Northrop 1963: :func:`beltkit.particles.gyrofrequency`),
    bounce and drift periods in the centred dipole (Hamlin et al. 1961:
    :func:`beltkit.motion.bounce_period`, :func:`beltkit.motion.drift_period`),
    the mirror point (:func:`beltkit.dipole.mirror_mlat`) and the equatorial
    bounce loss cone at ``--footpoint-km`` (:func:`beltkit.dipole.bounce_loss_cone`).
    """
    from . import dipole, motion, particles

    sp = check_species(args.species)
    e, L, a, h = args.energy_kev, args.L, args.pitch_angle, args.footpoint_km
    _check_line_reaches(L, h)
    b_eq = dipole.equatorial_field(L)
    lam_m = dipole.mirror_mlat(a)
    t_drift = motion.drift_period(e, L, a, species=sp.name)
    blc = float(dipole.bounce_loss_cone(L, h))
    inside = min(a, 180.0 - a) < blc
    notes = []
    if inside:
        notes.append(f"inside the bounce loss cone ({blc:.2f} deg at --footpoint-km {h:g}): "
                     f"lost within one bounce; the periods below are those of an "
                     f"unobstructed dipole orbit and the mirror point lies below the "
                     f"footpoint altitude")
    rows = [
        ("species", "species", sp.name, ""),
        ("energy", "kinetic energy", e, "keV"),
        ("L", "L-shell", L, ""),
        ("pitch_angle", "equatorial pitch angle", a, "degree"),
        ("lorentz_factor", "Lorentz factor", particles.lorentz_factor(e, species=sp.name), ""),
        ("speed", "speed", particles.speed(e, species=sp.name), "m/s"),
        ("b_equator", "equatorial field", b_eq, "nT"),
        ("gyrofrequency", "gyrofrequency at the equator",
         particles.gyrofrequency(b_eq, e, species=sp.name), "Hz"),
        ("gyroperiod", "gyroperiod at the equator",
         particles.gyroperiod(b_eq, e, species=sp.name), "s"),
        ("gyroradius", "gyroradius at the equator",
         particles.gyroradius(b_eq, e, a, species=sp.name), "km"),
        ("bounce_period", "bounce period", motion.bounce_period(e, L, a, species=sp.name), "s"),
        ("drift_period", "drift period", t_drift, "s"),
        ("drift_period_min", "drift period", t_drift / 60.0, "min"),
        ("drift_direction", "drift direction", motion.drift_direction(sp.name), ""),
        ("mirror_mlat", "mirror latitude", lam_m, "degree"),
        ("mirror_altitude", "mirror altitude", dipole.mirror_altitude(L, a), "km"),
        ("first_invariant", "first invariant",
         particles.first_invariant(e, a, b_eq, species=sp.name), "MeV/G"),
        ("footpoint_altitude", "footpoint altitude", h, "km"),
        ("bounce_loss_cone", f"equatorial bounce loss cone ({h:g} km)", blc, "degree"),
        ("in_bounce_loss_cone", "inside the bounce loss cone", bool(inside), ""),
    ]
    rows = [(k, lab, _plain_value(v), u) for k, lab, v, u in rows]
    return _table(rows, args.json, notes)


_GEO_ONLY = (("latitude", "--latitude"), ("longitude", "--longitude"),
             ("height_km", "--height-km"), ("time", "--time"))


def _losscone_dipole(args, h):
    from . import dipole

    given = [opt for attr, opt in _GEO_ONLY if getattr(args, attr) is not None]
    if given:
        raise OptionError(
            f"--L/--mlat cannot be combined with {', '.join(given)}: give either --L/--mlat "
            f"for the centred dipole, or --latitude/--longitude/--height-km/--time for a "
            f"geographic point")
    if args.field != "dipole":
        raise OptionError(
            f"--field {args.field} needs a geographic point (--latitude/--longitude/"
            f"--height-km/--time); --L/--mlat use the centred-dipole closed forms")
    L = args.L
    lam = 0.0 if args.mlat is None else args.mlat
    _check_line_reaches(L, h)
    if L * math.cos(math.radians(lam)) ** 2 < 1.0 - 1e-12:  # as beltkit.dipole checks it
        limit = float(dipole.footpoint_mlat(L, altitude_km=0.0))
        raise OptionError(
            f"--mlat {lam:g} on --L {L:g} is inside the Earth (r = L cos^2(mlat) = "
            f"{L * math.cos(math.radians(lam)) ** 2:.4g} R_E); the largest allowed |--mlat| "
            f"for --L {L:g} is {limit:.4f} deg, the line's surface footpoint latitude")
    notes = []
    lam_f = float(dipole.footpoint_mlat(L, h))
    if abs(lam) > lam_f:
        notes.append(f"below the footpoint altitude (--footpoint-km {h:g}): every particle "
                     f"is lost (local loss cones 90 deg)")
    rows = [
        ("L", "L-shell", L, ""),
        ("mlat", "magnetic latitude", lam, "degree"),
        ("footpoint_altitude", "footpoint altitude", h, "km"),
        ("b_local", "field at the point", dipole.field_magnitude(L, lam), "nT"),
        ("b_foot", "footpoint field", dipole.footpoint_field(L, h), "nT"),
        ("footpoint_mlat", "footpoint magnetic latitude", lam_f, "degree"),
        ("blc_local", "local bounce loss cone", dipole.local_loss_cone(L, lam, h), "degree"),
        ("blc_equatorial", "equatorial bounce loss cone", dipole.bounce_loss_cone(L, h),
         "degree"),
        ("dlc_local", "local drift loss cone (= bounce, centred dipole)",
         dipole.local_loss_cone(L, lam, h), "degree"),
        ("dlc_equatorial", "equatorial drift loss cone (= bounce, centred dipole)",
         dipole.bounce_loss_cone(L, h), "degree"),
    ]
    return rows, notes


def _losscone_geographic(args, h):
    import numpy as np

    from . import field
    from .constants import R_E_KM

    if args.mlat is not None:
        raise OptionError(
            "--mlat cannot be combined with --latitude/--longitude: give either --L/--mlat "
            "for the centred dipole, or --latitude/--longitude/--height-km/--time for a "
            "geographic point")
    if args.latitude is None or args.longitude is None:
        raise OptionError("give both --latitude and --longitude (and --height-km, --time) for a "
                       "geographic point")
    if args.time is None:
        raise OptionError(f"--time is required with --latitude/--longitude: MLT and the field "
                       f"epoch depend on it; give an ISO 8601 UTC time such as "
                       f"{TIME_EXAMPLE}")
    height = DEFAULT_HEIGHT_KM if args.height_km is None else args.height_km
    xyz = np.asarray(field.geodetic_to_geo(args.latitude, args.longitude, height),
                     dtype=float).reshape(1, 3)
    above_sphere = float(np.sqrt(np.sum(xyz**2))) - R_E_KM
    if above_sphere < h:
        raise OptionError(
            f"--height-km {height:g} puts the point {above_sphere:.1f} km above the R_E = "
            f"{R_E_KM:g} km sphere, below the footpoint altitude --footpoint-km {h:g}; the "
            f"loss cones are computed only above it: give a larger --height-km or a smaller "
            f"--footpoint-km")
    model = field.as_model(args.field)
    t = np.array([args.time], dtype="datetime64[ns]")
    res = field.loss_cones(model, xyz, t, altitude_km=h)
    names = [
        ("L", "L-shell", ""), ("mlat", "magnetic latitude", "degree"),
        ("mlt", "magnetic local time", "hour"), ("b_local", "field at the point", "nT"),
        ("b_min", "minimum field on the line", "nT"),
        ("b_foot_north", "northern footpoint field", "nT"),
        ("b_foot_south", "southern footpoint field", "nT"),
        ("b_foot_drift_min", "weakest footpoint field on the drift shell", "nT"),
        ("blc_local", "local bounce loss cone", "degree"),
        ("dlc_local", "local drift loss cone", "degree"),
        ("blc_equatorial", "equatorial bounce loss cone", "degree"),
        ("dlc_equatorial", "equatorial drift loss cone", "degree"),
    ]
    time_text = str(np.datetime_as_string(args.time, unit="s"))
    rows = [("model", "field model", model.name, ""),
            ("time", "time (UTC)", time_text, ""),
            ("latitude", "geodetic latitude", args.latitude, "degree"),
            ("longitude", "longitude", args.longitude, "degree"),
            ("height", "height", height, "km"),
            ("footpoint_altitude", "footpoint altitude", h, "km")]
    for key, label, unit in names:
        if key in res.variables:
            rows.append((key, label, float(np.asarray(res[key].values).ravel()[0]), unit))
    notes = []
    what = {"igrf": "IGRF", "dipole": "centred dipole"}.get(model.name, model.name)
    L = float(np.asarray(res["L"].values).ravel()[0]) if "L" in res.variables else math.nan
    is_open = ("open" in res.variables
               and bool(np.asarray(res["open"].values).ravel()[0]))
    if is_open:
        notes.append(f"the field line through the point does not close in the {what}: L "
                     f"and the loss cones are undefined there; the {what} is an "
                     f"internal-field model only, and at such latitudes the real field line "
                     f"depends on the magnetospheric currents (an external-field model)")
    elif math.isnan(L):
        notes.append("L is undefined here: a particle mirroring at this point would mirror "
                     "below the Earth's surface at the other end of its field line (the field "
                     "here exceeds the field where the line meets the surface), so McIlwain's "
                     "integral invariant does not exist; the loss cones above are still "
                     "defined")
    elif L > 10:
        notes.append(f"L = {L:.3g} > 10: the {what} is an internal-field model only; "
                     f"L, the drift shell and the loss cones there are not reliable without "
                     f"an external-field model")
    return rows, notes


def losscone_text(args) -> str:
    """Return the ``beltkit losscone`` table for parsed options (text, or JSON with ``--json``).

    Either the centred-dipole closed forms at ``--L``/``--mlat``
    (:func:`beltkit.dipole.local_loss_cone`) or the bounce and drift loss
    cones at a geographic point in a field model
    (:func:`beltkit.field.loss_cones`).
    """
    h = args.footpoint_km
    if args.L is not None:
        rows, notes = _losscone_dipole(args, h)
    elif (args.latitude is None and args.longitude is None and args.height_km is None
          and args.time is None):
        raise OptionError("give --L (and --mlat) for the centred-dipole closed forms, or "
                       "--latitude and --longitude (with --height-km, --time) for a point in "
                       "geographic coordinates")
    else:
        rows, notes = _losscone_geographic(args, h)
    rows = [(k, lab, _plain_value(v), u) for k, lab, v, u in rows]
    return _table(rows, args.json, notes)

