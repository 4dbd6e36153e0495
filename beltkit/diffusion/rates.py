r"""Diffusion coefficient, strong-diffusion lifetime and regime from z0 (Kennel-Petschek)."""

from __future__ import annotations

import numpy as np
import xarray as xr

from .. import dipole, motion, particles
from .._wrap import array_api, as_float_array, check_range
from ..constants import R_E_KM, R_E_M
from ..errors import PhysicsError
from .profile import check_z0

__all__ = [
    "LOSS_TIMES",
    "REGIME_MEANINGS",
    "diffusion_regime",
    "loss_fraction",
    "loss_time_text",
    "pitch_angle_diffusion",
    "regime_attrs",
    "regime_codes",
    "strong_diffusion_lifetime",
    "tau_sd_seconds",
]

#: Loss-time conventions accepted by :func:`pitch_angle_diffusion`, as fractions of the
#: bounce period of a particle at the loss-cone edge.
LOSS_TIMES = {"half_bounce": 0.5, "quarter_bounce": 0.25}
#: Values of ``diffusion_regime`` (common practice: the boundary is z0 = 1).
REGIME_MEANINGS = {0: "undetermined", 1: "strong_diffusion", 2: "weak_diffusion"}


# ---------------------------------------------------------------- rates and lifetimes


def loss_fraction(loss_time):
    """Return the fraction of the bounce period a loss-time convention names."""
    if loss_time not in LOSS_TIMES:
        raise PhysicsError(f"argument 'loss_time' must be one of {', '.join(LOSS_TIMES)}; got "
                           f"{loss_time!r}")
    return LOSS_TIMES[loss_time]


def loss_time_text(loss_time):
    """Return a loss-time convention in words (for attributes)."""
    return loss_time.replace("_", " ") + " period of a particle at the loss-cone edge"


def _c7(cos2_foot):
    r"""Return the integral of cos^7 between the feet, 2 (s - s^3 + 3 s^5/5 - s^7/7)."""
    s = np.sqrt(1.0 - cos2_foot)
    s2 = s * s
    return 2.0 * s * (1.0 - s2 + s2 * s2 * (0.6 - s2 / 7.0))


def tau_sd_seconds(L, energy_kev, species, sin2_a0, altitude_km):
    """tau_SD = 2 L R_E C7 / (v sin^2 alpha0) (unchecked kernel)."""
    cos2 = (1.0 + altitude_km / R_E_KM) / L
    v = particles.speed(energy_kev, species)
    return 2.0 * L * R_E_M * _c7(cos2) / (v * sin2_a0)


@array_api("s", long_name="strong-diffusion lifetime: emptying time of an isotropic flux tube "
                          "through both feet")
def strong_diffusion_lifetime(L, energy_kev, species="electron", altitude_km=100.0):
    r"""Lifetime of an isotropic flux tube that empties through both feet (strong diffusion).

    With isotropic flux :math:`j` on a dipole line, the particles of one energy
    per unit equatorial cross-section of the flux tube number
    :math:`N = (4\pi j / v) \int n\, B_{eq}/B\, ds = (4\pi j/v) L R_E C_7`,
    because :math:`ds\, B_{eq}/B = L R_E \cos^7\lambda\, d\lambda` on the line
    :math:`r = L R_E\cos^2\lambda`; each foot (where the local loss cone is the
    whole downgoing hemisphere) receives :math:`\pi j` per unit area, and its
    area per unit equatorial area is :math:`B_{eq}/B_f = \sin^2\alpha_0`.
    Hence

    .. math::

        \tau_{SD} = \frac{N}{2\pi j \sin^2\alpha_0}
        = \frac{2 L R_E C_7}{v \sin^2\alpha_0}, \qquad
        C_7 = \int_{-\lambda_f}^{\lambda_f}\cos^7\lambda\, d\lambda
        = 2\left(s - s^3 + \tfrac35 s^5 - \tfrac17 s^7\right),\ s = \sin\lambda_f .

    With feet at the surface, :math:`1/\sin^2\alpha_0 = L^3 (4 - 3/L)^{1/2}`, so
    :math:`\tau_{SD} = 2 C_7 L^4 (4 - 3/L)^{1/2} R_E / v` with
    :math:`C_7 \to 32/35` at large L: the :math:`L^4 (4 - 3/L)^{1/2} R_E/v`
    scaling of the published form (Schulz 1974, from memory; its prefactor was
    not checked against the paper, the one here is derived above and checked
    by quadrature in the tests).

    Parameters
    ----------
    L : array_like or xarray.DataArray
        Dipole L, at least ``1 + altitude_km / R_E``.
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV (> 0).
    species : str or Species
        Particle species (:func:`beltkit.particles.get_species`).
    altitude_km : float
        Altitude of the feet where particles are lost, in km above the sphere
        of radius R_E = 6371.2 km (:data:`beltkit.constants.R_E_KM`), not the
        ellipsoid (default 100).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`\tau_{SD}` in s.

    Notes
    -----
    Relation to the loss time: with :math:`\tau` half a bounce period, the loss
    rate :math:`N_{cone}/\tau` of a full cone equals the precipitating flux
    :math:`2\pi j \sin^2\alpha_0` above (:math:`N_{cone} = \pi j \sin^2\alpha_0 T_b`
    at small :math:`\alpha_0`), so the limit :math:`z_0 \to 0` of the
    diffusion solution is this emptying time (Kennel & Petschek 1966).

    Examples
    --------
    >>> round(strong_diffusion_lifetime(4.5, 300.0), 2)
    35.67
    """
    L = check_range(L, "L", lo=1.0, hi=np.inf, hi_open=True,
                    hint="L is the equatorial distance of the field line in Earth radii")
    e = check_range(energy_kev, "energy_kev", lo=0.0, lo_open=True, hi=np.inf, hi_open=True,
                    hint="Kinetic energy is in keV and positive")
    a0 = np.radians(dipole.bounce_loss_cone(L, altitude_km=altitude_km))
    return tau_sd_seconds(L, e, species, np.sin(a0) ** 2, float(altitude_km))


def _diffusion(z0, L, energy_kev, species, altitude_km, loss_time):
    frac = loss_fraction(loss_time)
    z = check_z0(z0)
    a0 = dipole.bounce_loss_cone(L, altitude_km=altitude_km)
    e = check_range(energy_kev, "energy_kev", lo=0.0, lo_open=True, hi=np.inf, hi_open=True,
                    hint="Kinetic energy is in keV and positive")
    tau = frac * motion.bounce_period(e, L, a0, species)
    with np.errstate(divide="ignore"):
        return np.radians(a0) ** 2 / (z * z * tau)


_pad_wrapped = array_api("s-1", long_name="bounce-averaged pitch-angle diffusion coefficient "
                                          "at the loss-cone edge")(_diffusion)


def pitch_angle_diffusion(z0, L, energy_kev, species="electron", *, altitude_km=100.0,
                          loss_time="half_bounce"):
    r"""Pitch-angle diffusion coefficient at the loss-cone edge from :math:`z_0`, in a dipole.

    .. math:: D = \frac{\alpha_0^2}{z_0^2\, \tau}, \qquad \tau = c\, T_b(E, L, \alpha_0)

    with :math:`\alpha_0` the equatorial bounce loss cone (radians) of the
    centred dipole for feet at ``altitude_km`` (:func:`beltkit.dipole.bounce_loss_cone`)
    and :math:`T_b` the bounce period of a particle at the loss-cone edge
    (:func:`beltkit.motion.bounce_period`); :math:`c = 1/2` by default
    (``"half_bounce"``: particles in the cone reach an atmosphere within half a
    bounce; the strong-diffusion limit then matches
    :func:`strong_diffusion_lifetime`), :math:`1/4` for ``"quarter_bounce"``.

    Parameters
    ----------
    z0 : array_like or xarray.DataArray
        :math:`z_0 \ge 0` (0 gives an infinite D).
    L : array_like or xarray.DataArray
        Dipole L.
    energy_kev : array_like or xarray.DataArray
        Kinetic energy in keV.
    species : str or Species
        Particle species.
    altitude_km : float, keyword-only
        Altitude of the feet, in km above the sphere of radius R_E = 6371.2 km
        (:data:`beltkit.constants.R_E_KM`), not the ellipsoid (default 100).
    loss_time : {"half_bounce", "quarter_bounce"}, keyword-only
        Loss time inside the cone, as a fraction of the bounce period.

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        :math:`D` in s-1 (a DataArray's ``long_name`` names the loss time).

    Notes
    -----
    Kennel & Petschek (1966).

    Examples
    --------
    >>> d = pitch_angle_diffusion(1.0, 4.5, 300.0)
    >>> round(d / pitch_angle_diffusion(1.0, 4.5, 300.0, loss_time="quarter_bounce"), 12)
    0.5
    """
    out = _pad_wrapped(z0, L, energy_kev, species, altitude_km, loss_time)
    if isinstance(out, xr.DataArray):
        out.attrs["long_name"] += f" (loss time: {loss_time_text(loss_time)})"
        out.attrs["beltkit_loss_time"] = loss_time
    return out


def regime_codes(z, z_lo=None, z_hi=None):
    """Return the regime code per z0 (and its interval): see REGIME_MEANINGS."""
    z = np.asarray(z, dtype=float)
    reg = np.where(z < 1.0, 1, np.where(z >= 1.0, 2, 0))
    if z_lo is not None:
        reg = np.where(np.isnan(z) & (z_hi < 1.0), 1, reg)
        reg = np.where(np.isnan(z) & (z_lo > 1.0), 2, reg)
    return reg.astype(np.int8)


def diffusion_regime(z0):
    r"""Diffusion regime of :math:`z_0`: 1 strong (:math:`z_0 < 1`), 2 weak, 0 undetermined.

    The boundary :math:`z_0 = 1` is common practice (Kennel & Petschek 1966:
    the loss cone is nearly full below it and nearly empty well above it).

    Parameters
    ----------
    z0 : array_like or xarray.DataArray
        :math:`z_0` (NaN gives 0).

    Returns
    -------
    numpy.ndarray, int or xarray.DataArray
        int8 codes of :data:`REGIME_MEANINGS` (a DataArray carries
        ``flag_values`` and ``flag_meanings``).

    Examples
    --------
    >>> diffusion_regime([0.5, 3.0, float("nan")]).tolist()
    [1, 2, 0]
    """
    if isinstance(z0, xr.DataArray):
        out = xr.apply_ufunc(regime_codes, z0, dask="parallelized", output_dtypes=[np.int8])
        out.attrs = regime_attrs()
        return out
    r = regime_codes(as_float_array(z0, "z0"))
    return int(r) if r.ndim == 0 else r


def regime_attrs():
    """Return the CF attributes of ``diffusion_regime``."""
    return {"long_name": "pitch-angle diffusion regime (boundary z0 = 1, common practice)",
            "flag_values": np.array(list(REGIME_MEANINGS), dtype=np.int8),
            "flag_meanings": " ".join(REGIME_MEANINGS.values())}


