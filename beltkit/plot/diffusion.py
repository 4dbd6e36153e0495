"""The diffusion overview: z0, D and lifetimes over time, and measured against model profiles."""

from __future__ import annotations

import numpy as np

from .style import (
    energy_text,
    new_axes,
    time_text,
)

__all__ = [
    "diffusion_overview",
]


# --------------------------------------------------------------------------- diffusion
def diffusion_overview(result, ds=None, *, energy=None, time=None, axes=None):
    r"""Pitch-angle diffusion along an orbit against L, and the loss-cone profile of one sample.

    Left panel: the diffusion coefficient at the loss-cone edge (log scale)
    of :func:`beltkit.diffusion.from_pitch_angle_data` against L for one
    energy, with its interval as a vertical bar; the marker gives the regime
    (filled circle strong diffusion, open square weak, grey diamond
    undetermined), and a triangle marks a one-sided interval (pointing up: only
    a lower bound on D, down: only an upper bound). Right panel: for one
    sample, the fitted steady-state profile :math:`f/f(\alpha_0)` against
    :math:`\alpha_{eq}/\alpha_0` and, with
    ``ds``, the measured bins or looks at their centres mapped to the equator,
    scaled by one common factor onto the fit (their shape, not their level, is
    what is compared).

    Parameters
    ----------
    result : xarray.Dataset
        Output of :func:`beltkit.diffusion.from_pitch_angle_data`.
    ds : xarray.Dataset, optional
        The flux dataset it came from (adds the measured points and the L of
        the samples when ``result`` has none).
    energy : float, keyword-only, optional
        Energy channel (keV, nearest); default the lowest.
    time : str or numpy.datetime64, keyword-only, optional
        Sample of the right panel (nearest); default the sample whose z0 is the
        median of the finite ones.
    axes : sequence of two matplotlib.axes.Axes, keyword-only, optional
        Axes to draw into.

    Returns
    -------
    matplotlib.figure.Figure
        The figure.
    """
    from ..diffusion import loss_cone_profile

    if axes is None:
        fig, axes = new_axes(None, (11.0, 4.5), 1, 2)
    else:
        fig = axes[0].figure
    ax_d, ax_p = axes
    e_all = np.asarray(result["energy"].values, dtype=float)
    k = 0 if energy is None else int(np.argmin(np.abs(e_all - float(energy))))
    res = result.isel(energy=k)
    if "L" in result.variables:
        L = np.asarray(result["L"].values, dtype=float)
    elif ds is not None and "L" in ds.variables:
        L = np.asarray(ds["L"].values, dtype=float)
    else:
        raise ValueError("diffusion_overview needs L: pass the flux dataset as ds")
    d = np.asarray(res["diffusion_coefficient"].values, dtype=float)
    lo = np.asarray(res["diffusion_coefficient_lower"].values, dtype=float)
    hi = np.asarray(res["diffusion_coefficient_upper"].values, dtype=float)
    regime = np.asarray(res["diffusion_regime"].values)
    flag = np.asarray(res["diffusion_flag"].values)
    finite = np.isfinite(d) & (d > 0)
    positive = lo[np.isfinite(lo) & (lo > 0)]
    floor = positive.min() / 3 if positive.size else 1e-6
    top = np.where(np.isfinite(hi), hi, np.nan)
    ceil = np.nanmax(np.concatenate([top[np.isfinite(top)], d[finite], [floor * 10]])) * 3
    bar_lo = np.where(np.isfinite(lo) & (lo > 0), lo, floor)
    bar_hi = np.where(np.isfinite(hi), hi, ceil)
    shown = finite | np.isfinite(lo)
    ax_d.vlines(L[shown], bar_lo[shown], bar_hi[shown], color="0.55", lw=0.8, zorder=1)
    styles = {1: ("o", "C0", "full", "strong diffusion (z0 < 1)"),
              2: ("s", "C1", "none", "weak diffusion (z0 > 1)"),
              0: ("D", "0.5", "full", "undetermined")}
    for code, (marker, colour, fill, label) in styles.items():
        sel = finite & (regime == code)
        if sel.any():
            ax_d.plot(L[sel], d[sel], ls="none", marker=marker, color=colour, fillstyle=fill,
                      ms=5, label=label, zorder=2)
    # z0 consistent with 0 (flag 2): only a lower bound on D; z0 unbounded above (flag 4):
    # only an upper bound on D
    above = ~finite & np.isfinite(lo) & (lo > 0) & ((flag & 2) > 0)
    below = ~finite & np.isfinite(hi) & ((flag & 4) > 0)
    if above.any():
        ax_d.plot(L[above], lo[above], ls="none", marker="^", color="C2", ms=6,
                  label="lower bound on D only", zorder=2)
    if below.any():
        ax_d.plot(L[below], hi[below], ls="none", marker="v", color="C4", ms=6,
                  label="upper bound on D only", zorder=2)
    ax_d.set_yscale("log")
    ax_d.set_ylim(floor, ceil)
    ax_d.set_xlabel("L")
    ax_d.set_ylabel("D at the loss-cone edge (s$^{-1}$)")
    loss_time = result.attrs.get("beltkit_loss_time", "half_bounce").replace("_", " ")
    ax_d.set_title(f"{energy_text(e_all[k])}: D with its interval (loss time {loss_time})",
                   fontsize="medium")
    ax_d.grid(alpha=0.3, which="both")
    ax_d.legend(fontsize="small", loc="best")

    z_all = np.asarray(res["z0"].values, dtype=float)
    times = result["time"].values
    if time is not None:
        i = int(np.argmin(np.abs(times - np.datetime64(time, "ns"))))
    elif np.isfinite(z_all).any():
        good = np.flatnonzero(np.isfinite(z_all))
        i = int(good[np.argsort(z_all[good])[good.size // 2]])
    else:
        i = 0
    z0 = z_all[i]
    a0 = float(result["diffusion_loss_cone"].values[i])
    u = np.linspace(0.0, 3.0, 301)
    if np.isfinite(z0) and np.isfinite(a0):
        ax_p.plot(u, loss_cone_profile(u * a0, a0, z0), color="C0", lw=1.8,
                  label=f"fitted profile, z0 = {z0:.3g}")
        if ds is not None:
            _measured_profile(ax_p, ds, result, i, k, a0, z0)
    else:
        ax_p.text(0.5, 0.5, "no z0 at this sample", transform=ax_p.transAxes, ha="center")
    ax_p.axvline(1.0, color="0.4", ls=":", lw=1.0, label="loss-cone edge")
    ax_p.set_xlim(0.0, 3.0)
    ax_p.set_xlabel(r"equatorial pitch angle / loss cone, $\alpha_{eq}/\alpha_0$")
    ax_p.set_ylabel(r"$f / f(\alpha_0)$")
    ax_p.set_title(f"{time_text(times[i])}, alpha0 = {a0:.3g} deg", fontsize="medium")
    ax_p.grid(alpha=0.3)
    ax_p.legend(fontsize="small", loc="lower right")
    return fig


def _measured_profile(ax, ds, result, i, k, a0, z0):
    """Draw the measured bins (or looks) of sample i, energy k, scaled onto the fit."""
    from ..diffusion import loss_cone_profile

    adim = "look" if "look" in ds["flux"].dims else "pitch_angle"
    flux = np.asarray(ds["flux"].isel(time=i, energy=k).transpose(adim).values, dtype=float)
    if adim == "look":
        local = np.asarray(ds["look_pitch_angle"].isel(time=i).values, dtype=float)
    else:
        local = np.asarray(ds["pitch_angle"].values, dtype=float)
    local = np.minimum(local, 180.0 - local)
    ratio = float(result["diffusion_field_ratio"].values[i])
    s = np.sin(np.radians(local)) * np.sqrt(ratio)
    aeq = np.degrees(np.arcsin(np.clip(s, 0.0, 1.0)))
    u = aeq / a0
    use = np.isfinite(flux) & (flux > 0) & (u <= 3.0)
    if not use.any():
        return
    model = np.asarray(loss_cone_profile(np.minimum(aeq[use], 90.0), a0, z0), dtype=float)
    scale = np.exp(np.mean(np.log(model) - np.log(flux[use])))
    ax.plot(u[use], flux[use] * scale, ls="none", marker="o", fillstyle="none", color="C3",
            label="measured (bin centres mapped to the equator, one common scale)")
