r"""Fitted fill of unsampled solid angle with the trapped sine-power fit (opt-in).

Where a population is not fully sampled, ``partition(..., fill="sine_power")``
adds to its measured integral the integral of the fit
:math:`j = A\sin^n\alpha` (:func:`beltkit.pad.fit_sine_power`, fitted on the
trapped bins) over the population's **unsampled** solid angle:

.. math::
    F^{fill}_P = 2\pi A\left[\int_P \sin^{n+1}\alpha\,d\alpha
    - \sum_{i\ \mathrm{sampled}} \int_{P \cap [a_{1i}, a_{2i}]} \sin^{n+1}\alpha\,d\alpha\right]

with :math:`G(\theta) = \int_0^\theta \sin^{n+1}\alpha\,d\alpha
= \tfrac12 B(\tfrac{n+2}{2}, \tfrac12)\, I_{\sin^2\theta}(\tfrac{n+2}{2}, \tfrac12)`
for :math:`\theta \le 90` deg (substitution :math:`t = \sin^2\alpha`; regularised
incomplete Beta function) and :math:`G(\theta) = 2G(90) - G(180 - \theta)` above.
This is an extrapolation of the trapped shape: it is applied only on request,
flagged (bit 128 of ``partition_flag``), and its uncertainty is not included in
the ``_err`` outputs.
"""

from __future__ import annotations

import numpy as np
from scipy import special

__all__ = ["sine_power_band_integral", "unsampled_fill"]


def _g(theta_deg, n):
    """Integral of sin^(n+1) from 0 to theta (deg, 0-180), broadcasting."""
    a = (np.asarray(n, dtype=float) + 2.0) / 2.0
    th = np.asarray(theta_deg, dtype=float)
    half = 0.5 * special.beta(a, 0.5)
    low = np.minimum(th, 180.0 - th)
    g_low = half * special.betainc(a, 0.5, np.sin(np.radians(low)) ** 2)
    return np.where(th <= 90.0, g_low, 2.0 * half - g_low)


def sine_power_band_integral(a1_deg, a2_deg, n):
    r"""Integral of :math:`\sin^{n+1}\alpha` d(alpha) over the pitch-angle band ``[a1, a2]``.

    .. math:: \int_{a_1}^{a_2} \sin^{n+1}\alpha\,d\alpha = G(a_2) - G(a_1)

    Parameters
    ----------
    a1_deg, a2_deg : array_like
        Band edges (deg, 0-180).
    n : array_like
        Sine-power index (> -2).

    Returns
    -------
    numpy.ndarray
        The integral; :math:`2\pi A` times it is the band's integrated flux.

    Examples
    --------
    >>> from scipy.special import beta
    >>> bool(np.isclose(sine_power_band_integral(0, 180, 2.0), beta(0.5, 2.0)))
    True
    """
    return _g(a2_deg, n) - _g(a1_deg, n)


def unsampled_fill(flux, amp, index, blc, dlc, edges, folded):
    """Fitted flux of each population over its unsampled solid angle.

    Parameters
    ----------
    flux : numpy.ndarray
        (n, E, P) measured flux (NaN = unsampled bin).
    amp, index : numpy.ndarray
        (n, E) fit parameters A and n (NaN where no fit).
    blc, dlc : numpy.ndarray
        (n,) loss cones (deg).
    edges : numpy.ndarray
        (P, 2) bin edges (deg).
    folded : bool
        Folded bins also stand for their mirror images.

    Returns
    -------
    numpy.ndarray
        (n, E, 3) fill for precipitating, quasi-trapped, trapped (cm-2 s-1 keV-1).
    """
    sampled = np.isfinite(flux)  # (n, E, P)
    nn = index[..., None]  # (n, E, 1)
    b = blc[:, None, None]
    d = np.maximum(dlc, blc)[:, None, None]
    ranges = (
        [(0.0, b), (180.0 - b, 180.0)],
        [(b, d), (180.0 - d, 180.0 - b)],
        [(d, 180.0 - d)],
    )
    lo, hi = edges[:, 0], edges[:, 1]
    bins = [(lo, hi)]
    if folded:
        bins.append((180.0 - hi, 180.0 - lo))
    out = np.empty(flux.shape[:2] + (3,))
    for k, parts in enumerate(ranges):
        total = 0.0
        seen = 0.0
        for r1, r2 in parts:
            r1b = np.broadcast_to(r1, b.shape)
            r2b = np.broadcast_to(r2, b.shape)
            total = total + sine_power_band_integral(r1b, r2b, nn)[..., 0]
            for blo, bhi in bins:
                x1 = np.clip(blo[None, None, :], r1b, r2b)
                x2 = np.clip(bhi[None, None, :], r1b, r2b)
                part = np.where(x2 > x1, sine_power_band_integral(x1, x2, nn), 0.0)
                seen = seen + np.where(sampled, part, 0.0).sum(axis=-1)
        out[..., k] = 2.0 * np.pi * amp * np.maximum(total - seen, 0.0)
    return out
