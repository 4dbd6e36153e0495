r"""Telescope archives: count rates per look turned into flux and Poisson errors.

A particle telescope counts :math:`N` particles of channel width
:math:`\Delta E` in an accumulation time :math:`\Delta t` through a geometric
factor :math:`G` (cm\ :sup:`2` sr) with detection efficiency
:math:`\varepsilon`. With a non-paralysable dead time :math:`\tau` the true
rate follows from the observed one (Knoll, *Radiation Detection and
Measurement*, 4th ed., 2010, section 4.VII; common practice):

.. math::

    R = N / \Delta t,\qquad R_{true} = \frac{R}{1 - R\tau},\qquad
    j = \frac{R_{true}}{G\,\varepsilon\,\Delta E}

and the 1-sigma Poisson error, propagated through the dead-time correction
(:math:`dR_{true}/dR = (1 - R\tau)^{-2}`):

.. math::

    \sigma_j = \frac{\sqrt{\max(N, 1)}/\Delta t}{(1 - R\tau)^2\,G\,\varepsilon\,\Delta E}

(an empty bin counts as one count, so that it does not claim a zero error,
as :doc:`conventions` does for ``counts``). A rate with :math:`R\tau \ge 1` is
beyond the dead-time model (saturated): its flux is NaN and flagged as out of
the valid range. Without an accumulation time (a count-rate archive that does
not give one) the counts are unknown and no ``flux_err`` is made.

The inputs may be scalars or arrays broadcasting against the rates (a
geometric factor per look, per channel, or per channel and look).
"""

from __future__ import annotations

import numpy as np

__all__ = ["rate_to_flux"]


def rate_to_flux(rate_per_s, geometric_factor_cm2_sr, energy_width_kev, *,
                 accumulation_time_s=None, dead_time_s=0.0, efficiency=1.0):
    r"""Return flux, its Poisson error and the saturated mask from count rates.

    Parameters
    ----------
    rate_per_s : array_like
        Observed count rate (s\ :sup:`-1`); NaN where missing.
    geometric_factor_cm2_sr : array_like
        Geometric factor G (cm2 sr), broadcasting against the rates.
    energy_width_kev : array_like
        Channel width :math:`\Delta E` (keV), broadcasting against the rates.
    accumulation_time_s : array_like, optional
        Accumulation time :math:`\Delta t` (s); without it no error is returned.
    dead_time_s : array_like
        Non-paralysable dead time :math:`\tau` (s); 0 for none.
    efficiency : array_like
        Detection efficiency :math:`\varepsilon` in (0, 1].

    Returns
    -------
    (numpy.ndarray, numpy.ndarray or None, numpy.ndarray)
        Flux (cm-2 s-1 sr-1 keV-1), its 1-sigma error (or None), and True
        where :math:`R\tau \ge 1` (flux NaN there).

    Examples
    --------
    >>> j, err, sat = rate_to_flux(100.0, 0.01, 10.0, accumulation_time_s=1.0)
    >>> float(j), float(err)
    (1000.0, 100.0)
    """
    r = np.asarray(rate_per_s, dtype=np.float64)
    live = 1.0 - r * np.asarray(dead_time_s, dtype=np.float64)
    saturated = live <= 0
    denom = (np.asarray(geometric_factor_cm2_sr, dtype=np.float64)
             * np.asarray(efficiency, dtype=np.float64)
             * np.asarray(energy_width_kev, dtype=np.float64))
    with np.errstate(divide="ignore", invalid="ignore"):
        live = np.where(saturated, np.nan, live)
        flux = r / live / denom
        err = None
        if accumulation_time_s is not None:
            dt = np.asarray(accumulation_time_s, dtype=np.float64)
            n = r * dt
            err = np.sqrt(np.maximum(n, 1.0)) / dt / live**2 / denom
            err = np.where(np.isnan(r), np.nan, err)
    return flux, err, saturated
