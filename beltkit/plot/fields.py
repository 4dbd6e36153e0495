"""Figures of field models: loss cones vs longitude, L* and drift loss cones per model, PSD."""

from __future__ import annotations

import numpy as np
from matplotlib.colors import Normalize
from matplotlib.figure import Figure

from .style import (
    FLUX_CMAP,
    FRACTION_CMAP,
    MARKERS,
    new_axes,
    time_axis,
    time_text,
)

__all__ = [
    "field_model_comparison",
    "loss_cone_longitude",
    "psd_radial_profiles",
]


# --------------------------------------------------------------------------- field models
def loss_cone_longitude(L=None, time=None, *, data=None, models=("dipole", "igrf"),
                        altitude_km=100.0, n_lon=72, ax=None):
    """Equatorial bounce and drift loss cones versus magnetic longitude at one L.

    Each model is one colour and marker; the bounce loss cone is a solid
    line, the drift loss cone (the largest bounce loss cone on the drift
    shell) dashed. A model whose two cones agree within 0.01 deg at every
    longitude (the centred dipole) gets one line, "bounce = drift loss cone".

    Parameters
    ----------
    L : float, optional
        L-shell (needed unless `data` is given).
    time : str or numpy.datetime64, optional
        Epoch of the field models (needed unless `data` is given).
    data : dict of str to xarray.Dataset, optional
        Precomputed results of :func:`beltkit.field.loss_cones_vs_longitude`
        keyed by model name (then `L`, `time`, `models` are not used).
    models : sequence of str or FieldModel
        Models to compute (``"dipole"``, ``"igrf"``).
    altitude_km : float
        Footpoint altitude, in km above the sphere of radius R_E = 6371.2 km
        (:data:`beltkit.constants.R_E_KM`), not the ellipsoid.
    n_lon : int
        Number of magnetic longitudes.
    ax : matplotlib.axes.Axes, optional
        Axes to draw into.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if data is None:
        if L is None or time is None:
            raise ValueError("loss_cone_longitude needs L and time, or data=")
        from ..field import as_model
        from ..field.losscone import loss_cones_vs_longitude

        data = {}
        for m in models:
            model = as_model(m)
            data[getattr(model, "name", str(m))] = loss_cones_vs_longitude(
                model, L, np.datetime64(time, "ns"), altitude_km=altitude_km, n_lon=n_lon)
    fig, ax = new_axes(ax, (7.0, 4.0))
    from matplotlib import colormaps

    cmap = colormaps[FRACTION_CMAP]
    for k, (name, d) in enumerate(data.items()):
        colour = cmap(0.1 + 0.55 * k / max(len(data) - 1, 1))
        marker = MARKERS[k % len(MARKERS)]
        lon = np.asarray(d["mlon"].values, float)
        order = np.argsort(lon)
        every = max(lon.size // 12, 1)
        blc = np.asarray(d["blc_equatorial"].values, float)[order]
        dlc = np.asarray(d["dlc_equatorial"].values, float)[order]
        gap = np.abs(dlc - blc)
        gap = gap[np.isfinite(gap)]
        if gap.size and gap.max() <= 0.01:  # coincident: one line, not one hidden under another
            label = f"{name}: bounce = drift loss cone" + (
                " (centred dipole)" if name == "dipole" else "")
            ax.plot(lon[order], blc, color=colour, ls="-", marker=marker, markevery=every,
                    ms=5, lw=1.6, label=label)
            continue
        ax.plot(lon[order], blc, color=colour, ls="-", marker=marker, markevery=every, ms=5,
                lw=1.6, label=f"{name}: bounce loss cone")
        ax.plot(lon[order], dlc, color=colour, ls="--", lw=1.6, label=f"{name}: drift loss cone")
    first = next(iter(data.values()))
    Lval = L if L is not None else first.attrs.get("L", first.get("L", np.nan))
    try:
        Ltext = f"L = {float(np.asarray(Lval).ravel()[0]):.2f}"
    except (TypeError, ValueError):
        Ltext = ""
    ax.set_xlabel("magnetic longitude (degree)")
    ax.set_ylabel("equatorial loss-cone angle (degree)")
    ax.set_xlim(-180, 180) if np.nanmin(first["mlon"]) < 0 else ax.set_xlim(0, 360)
    ax.set_title(f"Equatorial loss cones vs magnetic longitude, {Ltext}, "
                 f"footpoints at {altitude_km:g} km", fontsize="medium")
    ax.legend(fontsize="small", framealpha=0.85)
    ax.grid(alpha=0.3)
    return fig




def psd_radial_profiles(profiles, *, ax=None, cmap=FLUX_CMAP):
    """Phase-space density against L* at fixed (mu, K), one line per pass, coloured by time.

    Parameters
    ----------
    profiles : xarray.Dataset
        Output of :func:`beltkit.psd.radial_profiles` (``psd`` (pass, lstar),
        ``pass_time``, ``direction``).
    ax : matplotlib.axes.Axes, optional
        Axes to draw into.
    cmap : str, keyword-only
        Colour map of the pass times (earliest dark).

    Returns
    -------
    matplotlib.figure.Figure
        Log-scaled f against L*; solid lines outbound passes, dashed inbound;
        a colour bar gives each pass's middle time.
    """
    from matplotlib import colormaps
    from matplotlib.cm import ScalarMappable

    fig, ax = new_axes(ax, (7.0, 4.5))
    times = np.asarray(profiles["pass_time"].values, dtype="datetime64[ns]")
    hours = (times - times.min()) / np.timedelta64(1, "h")
    norm = Normalize(vmin=0.0, vmax=max(float(hours.max()), 1e-9))
    colours = colormaps[cmap]
    lstar = np.asarray(profiles["lstar"].values, dtype=float)
    direction = np.asarray(profiles["direction"].values)
    for p in range(profiles.sizes["pass"]):
        f = np.asarray(profiles["psd"].isel({"pass": p}).values, dtype=float)
        ax.plot(lstar, f, color=colours(norm(hours[p])), lw=1.6, marker=".",
                ls="-" if direction[p] > 0 else "--")
    ax.set_yscale("log")
    ax.set_xlabel("L*")
    ax.set_ylabel("phase-space density (c/(cm MeV))$^3$")
    mu = profiles.attrs.get("mu_mev_per_g", np.nan)
    k = profiles.attrs.get("k_g05_re", np.nan)
    ax.set_title(f"f at mu = {mu:g} MeV/G, K = {k:g} G$^{{1/2}}$ R$_E$ "
                 "(solid outbound, dashed inbound)", fontsize="medium")
    bar = fig.colorbar(ScalarMappable(norm=norm, cmap=colours), ax=ax)
    bar.set_label(f"hours after {time_text(times.min())}")
    ax.grid(alpha=0.3)
    return fig




def _model_label(attrs):
    """Legend text of a field-model run from its attributes: model, internal field, Kp."""
    name = str(attrs.get("field_model", "?"))
    desc = str(attrs.get("field_model_description", ""))
    if name == "t89":
        inner = "dipole" if "CenteredDipole" in desc else "IGRF"
        kp = attrs.get("kp")
        kp_text = f"Kp {float(kp):g}" if kp is not None else "Kp series"
        return f"{inner} + T89, {kp_text}"
    return {"dipole": "centred dipole", "igrf": "IGRF"}.get(name, name)


def field_model_comparison(runs, *, axes=None):
    r"""L* and the equatorial drift loss cone of one orbit in several field models.

    Parameters
    ----------
    runs : sequence of xarray.Dataset
        One dataset per model, along ``time``, each with ``lstar`` (1) and
        ``dlc_equatorial`` (degree), e.g. from :func:`beltkit.field.lstar`
        and :func:`beltkit.field.loss_cones` of the same samples, and the
        attributes those functions write (``field_model``,
        ``field_model_description``, ``kp``), which name the model and Kp in
        the legend.
    axes : sequence of two matplotlib Axes, optional
        Axes for the L* and the loss-cone panels; a new figure otherwise.

    Returns
    -------
    matplotlib.figure.Figure
        Two panels sharing the time axis; a model's samples where L* or the
        loss cone is undefined (open line or shell, see ``lstar_reason`` and
        ``open_reason``) are gaps. T89 runs are dashed at Kp >= 5.
    """
    if axes is None:
        fig = Figure(figsize=(9.0, 6.0), layout="constrained")
        ax_l, ax_c = fig.subplots(2, 1, sharex=True)
    else:
        ax_l, ax_c = axes
        fig = ax_l.figure
    families = {}
    for run in runs:
        label = _model_label(run.attrs)
        family = label.split(",")[0]
        colour = families.setdefault(family, f"C{len(families)}")
        kp = run.attrs.get("kp")
        style = "--" if kp is not None and float(kp) >= 5 else "-"
        t = run["time"].values
        ax_l.plot(t, run["lstar"].values, ls=style, color=colour, marker=".", label=label)
        ax_c.plot(t, run["dlc_equatorial"].values, ls=style, color=colour, marker=".",
                  label=label)
    ax_l.set_ylabel("Roederer L* (1)")
    ax_c.set_ylabel("equatorial drift loss cone (degree)")
    ax_c.set_xlabel("time (UTC)")
    ax_l.legend(title="field model", fontsize="small")
    ax_l.set_title("L* and drift loss cone by field model and activity "
                   "(gaps: undefined, open line or shell)")
    time_axis(ax_c)
    return fig
