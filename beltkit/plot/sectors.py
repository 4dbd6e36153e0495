"""Spin-sectored data: the sectors' pitch-angle coverage over a spin and the binned result."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from .._renamed import renamed_keyword
from .style import (
    FLUX_LABEL,
    energy_style,
    energy_text,
    time_text,
)

__all__ = [
    "sector_coverage",
]


@renamed_keyword("field", "model")
def sector_coverage(sectored, binned=None, *, time=None, energy=None, model=None, axes=None):
    """Draw the sectors' pitch-angle coverage over a spin and the binned distribution.

    Left: for each sector (at its mid spin phase) and detector, the band of
    pitch angles the look sweeps (:func:`beltkit.pad.sector_bands`: the field
    of view over a gyration, widened by the spin during the accumulation).
    Right: the pitch-angle distribution :func:`beltkit.pad.bin_sectors` made of
    them at one energy, with its Poisson errors, beside the generator's
    ``true_flux`` when the sectored data carry one (synthetic data).

    Parameters
    ----------
    sectored : xarray.Dataset
        Sectored data (``docs/conventions.md`` section 9).
    binned : xarray.Dataset, optional
        Its :func:`beltkit.pad.bin_sectors` output (default: binned here into
        12 bins of 15 deg).
    time : datetime-like, optional
        Sample to show (nearest; default the first).
    energy : float, optional
        Channel (keV, nearest; default the middle one).
    model : FieldModel or str, optional
        Field model, as for :func:`beltkit.pad.bin_sectors` (``field=`` is the
        deprecated former spelling).
    axes : pair of matplotlib.axes.Axes, optional
        Where to draw.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from ..pad import bin_sectors, sector_bands

    t_index = 0 if time is None else int(np.argmin(np.abs(
        sectored["time"].values - np.datetime64(time, "ns"))))
    one = sectored.isel(time=[t_index])
    if binned is None:
        binned = bin_sectors(one, np.linspace(0.0, 180.0, 13), model=model)
    else:
        binned = binned.sel(time=one["time"].values)
    e_values = binned["energy"].values
    e_index = e_values.size // 2 if energy is None else int(np.argmin(np.abs(e_values -
                                                                             energy)))
    bands = sector_bands(one, model=model).isel(time=0)
    if axes is None:
        fig = Figure(figsize=(10.0, 4.2), layout="constrained")
        ax_c, ax_d = fig.subplots(1, 2)
    else:
        ax_c, ax_d = axes
        fig = ax_c.figure
    if "detector" not in bands.dims:
        bands = bands.expand_dims(detector=1, axis=-1)
    n_s, n_d = bands.sizes["sector"], bands.sizes["detector"]
    if "sector_phase_bnds" in one:
        mid = one["sector_phase_bnds"].values.reshape(-1, n_s, 2)[0].mean(-1)
        xlabel = "spin phase at the sector's centre (degree)"
    else:
        mid = np.arange(n_s, dtype=float)
        xlabel = "sector"
    width = (mid[1] - mid[0]) if n_s > 1 else 1.0
    for d in range(n_d):
        off = (d - 0.5 * (n_d - 1)) * 0.8 * width / max(n_d, 1)
        lo = bands["band_lower"].values[:, d]
        hi = bands["band_upper"].values[:, d]
        colour, style, marker = energy_style(d, n_d)
        ax_c.vlines(mid + off, lo, hi, colors=[colour], linestyles=style, lw=2.5,
                    label=f"detector {d}")
        ax_c.plot(mid + off, 0.5 * (lo + hi), ls="none", marker=marker, color=colour)
    ax_c.set_ylim(180.0, 0.0)
    ax_c.set_xlabel(xlabel)
    ax_c.set_ylabel("pitch angle swept by the look (degree)")
    ax_c.legend(fontsize="small", loc="best")
    angle = ""
    if "spin_b_angle" in binned:
        angle = f", spin axis to B {float(binned['spin_b_angle'].values[0]):.0f} deg"
    ax_c.set_title(f"sector coverage over one spin{angle}")
    edges = binned["pitch_angle_bnds"].values
    flux = binned["flux"].values[0, e_index]
    err = binned["flux_err"].values[0, e_index] if "flux_err" in binned else None
    centres = binned["pitch_angle"].values
    ax_d.stairs(flux, np.r_[edges[:, 0], edges[-1, 1]], color="C0", lw=2,
                label="binned from the sectors")
    if err is not None:
        ax_d.errorbar(centres, flux, yerr=err, ls="none", color="C0", capsize=2)
    if "true_flux" in one:
        true = one["true_flux"].sel(energy=e_values[e_index], method="nearest").values[0]
        tb = one["true_pitch_angle_bnds"].values
        ax_d.stairs(true, np.r_[tb[:, 0], tb[-1, 1]], color="k", ls="--",
                    label="generator truth (synthetic)")
    unsampled = ~np.isfinite(flux)
    for k in np.flatnonzero(unsampled):
        ax_d.axvspan(edges[k, 0], edges[k, 1], color="0.85", lw=0)
    positive = flux[np.isfinite(flux) & (flux > 0)]
    if positive.size:
        ax_d.set_yscale("log")
    ax_d.set_xlim(0.0, 180.0)
    ax_d.set_xlabel("local pitch angle (degree)")
    ax_d.set_ylabel(FLUX_LABEL)
    ax_d.set_title(f"{energy_text(float(e_values[e_index]))}, "
                   f"{time_text(one['time'].values[0])}"
                   + (" (grey: unsampled)" if unsampled.any() else ""))
    ax_d.legend(fontsize="small", loc="best")
    return fig
