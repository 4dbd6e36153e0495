"""Pitch-angle distributions and spectrograms of flux data and their summaries."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from .style import (
    FLUX_CMAP,
    FLUX_LABEL,
    INTEGRATED_LABEL,
    L_MASK_NOTE,
    L_VALID_MAX,
    MIN_CONE_WIDTH_DEG,
    PARTIAL_LABELS,
    cone_digits,
    display_values,
    edges_from,
    energy_style,
    energy_text,
    loss_cones_at,
    new_axes,
    partial_coverage,
    partial_note,
    positive_norm,
    quantity_label,
    span_text,
    time_axis,
    time_edges,
    title_of,
    true_runs,
)

__all__ = [
    "energy_time",
    "pitch_angle_distribution",
    "pitch_angle_time",
    "spectrogram",
]


# --------------------------------------------------------------------------- PAD
def pitch_angle_distribution(ds, summary=None, time=None, *, energies=None, ax=None,
                             errorbars=True):
    """Plot the pitch-angle distribution at one time, one curve per energy.

    The bounce loss cones (towards the northern footpoint below 90 deg, the
    southern above) are shaded and hatched, at least
    :data:`MIN_CONE_WIDTH_DEG` wide so that a narrow cone stays visible, and
    their true edges are drawn as dashed lines (the legend gives the angles
    and says when the shading is widened); the band between the bounce and
    drift loss cones (where quasi-trapped particles are) is shaded lighter.
    Pitch-angle bins are drawn at their centres with their widths as
    horizontal bars; telescope looks at their axis pitch angle with the
    field-of-view half-angle as bar.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset (``flux`` with ``pitch_angle`` or ``look``).
    summary : xarray.Dataset, optional
        Its summary (loss cones ``blc_local``, ``dlc_local``,
        ``loss_cone_north``, ``loss_cone_south``); without one, the dipole
        loss cone of the dataset's ``L`` and ``mlat`` is drawn.
    time : str or numpy.datetime64, optional
        Time of the sample (nearest is taken); default the first.
    energies : sequence of float, optional
        Energies in keV to draw (nearest channels); default all.
    ax : matplotlib.axes.Axes, optional
        Axes to draw into.
    errorbars : bool
        Draw ``flux_err`` as vertical bars.

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = new_axes(ax, (7.0, 4.6))
    time = ds["time"].values[0] if time is None else np.datetime64(time, "ns")
    sample = ds.sel(time=time, method="nearest")
    e_all = np.asarray(ds["energy"].values, float)
    idx = (range(e_all.size) if energies is None else
           sorted({int(np.argmin(np.abs(e_all - e))) for e in np.atleast_1d(energies)}))
    telescope = "look" in ds["flux"].dims
    if telescope:
        x = np.asarray(sample["look_pitch_angle"].values, float)
        xerr = np.asarray(ds["look_half_angle"].values, float)
        order = np.argsort(x)
        angle_dim = "look"
    else:
        x = np.asarray(ds["pitch_angle"].values, float)
        edges = edges_from(ds, "pitch_angle")
        xerr = np.vstack([x - edges[:-1], edges[1:] - x])
        order = np.arange(x.size)
        angle_dim = "pitch_angle"
    cones = loss_cones_at(ds, summary, time)
    if cones is not None:
        north, south = float(cones["north"]), float(cones["south"])
        dlc = float(cones["dlc"])
        # a narrow cone is shaded at least MIN_CONE_WIDTH_DEG wide (and its true edge drawn
        # as a line), so that a cone of a fraction of a degree does not vanish on 0-180 deg
        narrow = min(north, south) < MIN_CONE_WIDTH_DEG
        ax.axvspan(0, max(north, MIN_CONE_WIDTH_DEG), facecolor="0.75", edgecolor="0.35",
                   hatch="//", lw=0,
                   label=f"bounce loss cone: {north:.{cone_digits(north)}f}° north-going / "
                         f"{south:.{cone_digits(south)}f}° south-going"
                         + (f" (shaded at least {MIN_CONE_WIDTH_DEG:g}° wide)" if narrow
                            else ""), zorder=0)
        ax.axvspan(180 - max(south, MIN_CONE_WIDTH_DEG), 180, facecolor="0.75",
                   edgecolor="0.35", hatch="//", lw=0, zorder=0)
        for edge in (north, 180 - south):  # the true edges, as lines over the shading
            ax.axvline(edge, color="0.15", lw=1.0, ls=(0, (4, 2)), zorder=1)
        if dlc > max(north, south) + 1e-6:
            ax.axvspan(north, dlc, facecolor="0.9", edgecolor="0.55", hatch="..", lw=0,
                       label=f"drift loss cone ({dlc:.1f}°): quasi-trapped", zorder=0)
            ax.axvspan(180 - dlc, 180 - south, facecolor="0.9", edgecolor="0.55",
                       hatch="..", lw=0, zorder=0)
    for rank, k in enumerate(idx):
        colour, ls, marker = energy_style(rank, len(idx))
        y = np.asarray(sample["flux"].isel(energy=k).transpose(angle_dim).values, float)
        yerr = None
        if errorbars and "flux_err" in sample:
            yerr = np.asarray(sample["flux_err"].isel(energy=k).transpose(angle_dim).values,
                              float)
        xe = xerr if telescope else xerr
        ax.errorbar(x[order], y[order], yerr=None if yerr is None else yerr[order],
                    xerr=xe[order] if telescope else xe[:, order], color=colour, ls=ls,
                    marker=marker, ms=4, lw=1.3, capsize=0, elinewidth=0.7,
                    label=energy_text(e_all[k]))
    ax.set_yscale("log")
    lo, hi = ax.get_ylim()
    ax.set_ylim(lo, hi * (hi / lo) ** 0.25)  # head room for the legend
    ax.set_xlim(0, 180)
    ax.set_xticks(np.arange(0, 181, 30))
    ax.set_xlabel("local pitch angle (degree)")
    ax.set_ylabel("directional " + FLUX_LABEL)
    ax.set_title(title_of(ds, sample), fontsize="medium")
    ax.legend(fontsize="small", ncols=2 if len(idx) > 4 else 1, loc="best", framealpha=0.85)
    return fig


# --------------------------------------------------------------------------- spectrograms
def energy_time(ds, *, pitch_angle=None, summary=None, ax=None, cmap=FLUX_CMAP):
    """Energy-time spectrogram of the flux.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset.
    pitch_angle : float, optional
        Local pitch angle in degrees: the bin (or telescope look) nearest to
        it is drawn. Default: the summary's omnidirectional flux when a
        summary is given, else the bin nearest 90 deg (the ``side`` look).
    summary : xarray.Dataset, optional
        Summary holding ``omni_flux``. When it comes from partially covered
        data (:func:`partial_coverage`) the flux is labelled as integrated
        over the measured solid angle, which is what it is.
    ax : matplotlib.axes.Axes, optional
        Axes to draw into.
    cmap : str
        Colour map (log scale).

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = new_axes(ax, (8.0, 3.4))
    if pitch_angle is None and summary is not None and "omni_flux" in summary:
        values = summary["omni_flux"].transpose("time", "energy")
        if partial_coverage(summary):
            label = PARTIAL_LABELS["omni_flux"].replace(" (cm", "\n(cm")
            what = "flux over the measured solid angle (partial coverage)"
        else:
            label, what = "omnidirectional " + INTEGRATED_LABEL, "omnidirectional"
    else:
        target = 90.0 if pitch_angle is None else float(pitch_angle)
        if "look" in ds["flux"].dims:
            mean_pa = ds["look_pitch_angle"].mean("time").values
            k = int(np.argmin(np.abs(mean_pa - target)))
            values = ds["flux"].isel(look=k).transpose("time", "energy")
            what = f"look '{ds['look'].values[k]}' (mean pitch angle {mean_pa[k]:.0f}°)"
        else:
            k = int(np.argmin(np.abs(ds["pitch_angle"].values - target)))
            values = ds["flux"].isel(pitch_angle=k).transpose("time", "energy")
            what = f"pitch angle {float(ds['pitch_angle'][k]):.1f}°"
        label = "directional " + FLUX_LABEL
    v = np.asarray(values.values, float)
    norm = positive_norm(v)
    mesh = ax.pcolormesh(time_edges(ds["time"].values), edges_from(ds, "energy"),
                         display_values(v, norm).T, norm=norm, cmap=cmap, shading="flat",
                         rasterized=True)
    time_axis(ax)
    ax.set_yscale("log")
    ax.set_ylabel("energy (keV)")
    ax.set_xlabel("time (UTC)")
    ax.set_title(f"{ds.attrs.get('spacecraft', '')} energy-time, {what}".strip(),
                 fontsize="medium")
    fig.colorbar(mesh, ax=ax, label=label, pad=0.01)
    return fig


def pitch_angle_time(ds, energy, *, summary=None, ax=None, cmap=FLUX_CMAP):
    """Pitch-angle-time spectrogram at one energy with the loss cones drawn over it.

    Loss-cone edges: solid white-edged lines for the bounce loss cones
    (north below 90 deg, south above), dashed for the drift loss cone. Where
    the two coincide everywhere (within 0.01 deg, as in a centred dipole) one
    line labelled "bounce = drift loss cone" is drawn instead of two. For
    telescope data each look is a band of points at its axis pitch angle.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset.
    energy : float
        Energy in keV (nearest channel).
    summary : xarray.Dataset, optional
        Summary with the loss cones; default the dipole loss cone.
    ax : matplotlib.axes.Axes, optional
        Axes to draw into.
    cmap : str
        Colour map (log scale).

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, ax = new_axes(ax, (8.0, 3.4))
    k = int(np.argmin(np.abs(ds["energy"].values - float(energy))))
    e_kev = float(ds["energy"].values[k])
    times = ds["time"].values
    if "look" in ds["flux"].dims:
        flux = np.asarray(ds["flux"].isel(energy=k).transpose("time", "look").values, float)
        pa = np.asarray(ds["look_pitch_angle"].transpose("time", "look").values, float)
        tt = np.broadcast_to(times[:, None], pa.shape)
        good = np.isfinite(flux) & np.isfinite(pa)
        norm = positive_norm(flux)
        mesh = ax.scatter(tt[good], pa[good], c=display_values(flux[good], norm), s=5, marker="s",
                          lw=0, norm=norm, cmap=cmap, rasterized=True)
    else:
        v = np.asarray(ds["flux"].isel(energy=k).transpose("time", "pitch_angle").values, float)
        norm = positive_norm(v)
        mesh = ax.pcolormesh(time_edges(times), edges_from(ds, "pitch_angle"),
                             display_values(v, norm).T, norm=norm, cmap=cmap, shading="flat",
                             rasterized=True)
    cones = loss_cones_at(ds, summary)
    if cones is not None:
        lines = [(cones["north"], "-", "bounce loss cone"), (180 - cones["south"], "-", None)]
        with np.errstate(invalid="ignore"):
            gap = np.concatenate([np.abs(cones["dlc"] - cones["north"]).ravel(),
                                  np.abs(cones["dlc"] - cones["south"]).ravel()])
        gap = gap[np.isfinite(gap)]
        if gap.size and gap.max() <= 0.01:  # coincident: one line, not one hidden under another
            model = "dipole" if summary is None else summary.attrs.get(
                "beltkit_field_model", "")
            lines[0] = (cones["north"], "-", "bounce = drift loss cone"
                        + (" (centred dipole)" if model == "dipole" else ""))
        else:
            lines += [(cones["dlc"], "--", "drift loss cone"), (180 - cones["dlc"], "--", None)]
        for y, style, label in lines:
            ax.plot(times, y, color="white", lw=2.6, ls="-", zorder=3)
            ax.plot(times, y, color="black", lw=1.1, ls=style, zorder=4, label=label)
        ax.legend(loc="upper right", fontsize="small", framealpha=0.85)
    ax.set_ylim(0, 180)
    ax.set_yticks(np.arange(0, 181, 45))
    time_axis(ax)
    ax.set_ylabel("local pitch angle (degree)")
    ax.set_xlabel("time (UTC)")
    ax.set_title(f"{ds.attrs.get('spacecraft', '')} pitch-angle-time at "
                 f"{energy_text(e_kev)}".strip(), fontsize="medium")
    fig.colorbar(mesh, ax=ax, label="directional " + FLUX_LABEL, pad=0.01)
    return fig


def spectrogram(ds, summary=None, *, energy=None, pitch_angle=None, ax=None, axes=None,
                l_max=L_VALID_MAX):
    """Three stacked panels over time: energy-time, pitch-angle-time and fractions.

    The figure's title gives the spacecraft and the time span covered. When
    the summary comes from partially covered data (:func:`partial_coverage`)
    the flux and fraction panels say that they refer to the measured solid
    angle and a note says so under the title. Fractions at L above `l_max`
    are not drawn; those times are greyed.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset.
    summary : xarray.Dataset, optional
        Its summary; adds the loss cones to the middle panel and the
        precipitating fraction per energy (with its uncertainty band) to the
        bottom one, which also shows L on a second axis and, where the field
        model gives one (not the centred dipole), the quasi-trapped fraction
        at the middle panel's energy as a thick black line.
    energy : float, optional
        Energy of the middle panel in keV (default: the channel nearest 300 keV).
    pitch_angle : float, optional
        Pitch angle of the top panel (default: omnidirectional flux when a
        summary is given, else nearest 90 deg).
    ax, axes : sequence of 3 matplotlib.axes.Axes, optional
        Axes to draw into (``ax`` and ``axes`` are the same argument; give
        one). With your own axes the time span goes into the top panel's
        title instead of a figure title.
    l_max : float or None
        Highest L-shell whose fractions are drawn (default
        :data:`L_VALID_MAX`, 10); None draws all.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if ax is not None and axes is not None:
        raise TypeError("spectrogram: give the axes once, as ax= or as axes=, not both")
    axes = ax if axes is None else axes
    own = axes is None
    if own:
        fig = Figure(figsize=(9.0, 8.8), layout="constrained")
        axes = fig.subplots(3, 1, sharex=True)
    else:
        axes = list(np.ravel(axes))
        if len(axes) != 3:
            raise ValueError(f"spectrogram needs 3 axes, got {len(axes)}")
        fig = axes[0].figure
    energy = 300.0 if energy is None else energy
    partial = summary is not None and partial_coverage(summary)
    energy_time(ds, pitch_angle=pitch_angle, summary=summary, ax=axes[0])
    pitch_angle_time(ds, energy, summary=summary, ax=axes[1])
    ax = axes[2]
    times = ds["time"].values
    L = np.asarray(ds["L"].values, float) if "L" in ds else None
    beyond = (np.zeros(times.size, bool) if L is None or l_max is None
              else np.isfinite(L) & (L > l_max))
    if summary is not None and "fraction_precipitating" in summary:
        e_all = np.asarray(summary["energy"].values, float)
        frac = summary["fraction_precipitating"].transpose("time", "energy")
        s_times = summary["time"].values
        if l_max is not None and "L" in summary:
            keep = ~(np.asarray(summary["L"].values, float) > l_max)
        elif l_max is not None and L is not None and s_times.size == times.size:
            keep = ~beyond
        else:
            keep = np.ones(s_times.size, bool)
        fv = np.where(keep[:, None], np.asarray(frac.values, float), np.nan)
        median = float(np.nanmedian(fv)) if np.isfinite(fv).any() else 1.0
        has_err = "fraction_precipitating_err" in summary
        band = summary["time"].size <= 3000 and has_err
        if has_err:
            ev = np.asarray(summary["fraction_precipitating_err"].transpose(
                "time", "energy").values, float)
        for k, e in enumerate(e_all):
            colour, ls, _ = energy_style(k, e_all.size)
            ax.plot(s_times, fv[:, k], color=colour, ls=ls, lw=1.1, label=energy_text(e))
            if band:
                ax.fill_between(s_times, fv[:, k] - ev[:, k], fv[:, k] + ev[:, k],
                                color=colour, alpha=0.25, lw=0)
        ylabel = quantity_label("fraction_precipitating", partial)
        if "fraction_quasi_trapped" in summary:  # drawn where the model gives it (not a dipole)
            qv = np.where(keep[:, None], np.asarray(summary["fraction_quasi_trapped"].transpose(
                "time", "energy").values, float), np.nan)
            if np.any(np.isfinite(qv) & (qv > 0)):
                kq = int(np.argmin(np.abs(e_all - energy)))
                ax.plot(s_times, qv[:, kq], color="black", lw=1.8, ls="-", zorder=3,
                        label=f"quasi-trapped, {energy_text(e_all[kq])}")
                ylabel = ylabel.replace("precipitating fraction",
                                        "precipitating (per energy) and\nquasi-trapped fraction")
        if median < 0.05:
            ax.set_yscale("log")
        else:
            ax.set_ylim(0, 1)
        ax.set_ylabel(ylabel.replace(" (partial coverage)", "\n(partial coverage)"))
        quasi_drawn = ylabel.startswith("precipitating (per energy)")
        if quasi_drawn:  # two kinds of lines fill the panel: the legend goes above it
            ax.legend(fontsize="x-small", ncols=5, loc="lower left", bbox_to_anchor=(0, 1.0),
                      borderaxespad=0.2, framealpha=0.85)
        else:
            ax.legend(fontsize="x-small", ncols=4, loc="upper left", framealpha=0.85)
    else:
        quasi_drawn = False
    first, last = true_runs(beyond)
    if first.size:
        edges = time_edges(times)
        for i, j in zip(first, last):
            ax.axvspan(edges[i], edges[j + 1], facecolor="0.82", edgecolor="none", zorder=0)
        ax.set_title(L_MASK_NOTE.format(l_max=l_max), fontsize="small",
                     pad=22 if quasi_drawn else 6)
    if L is not None:
        twin = ax.twinx() if summary is not None else ax
        shown = np.where(beyond, np.nan, L)
        twin.plot(times, shown, color="0.2", lw=1.0, ls=(0, (1, 1)), label="L")
        twin.set_ylabel("L-shell (dipole)")
        if first.size:
            twin.set_ylim(0, l_max * 1.05)
        if twin is not ax:
            twin.legend(loc="upper right", fontsize="x-small", framealpha=0.85)
    ax.set_xlabel("time (UTC)")
    time_axis(ax)
    for a in axes[:2]:
        a.set_xlabel("")
    craft = ds.attrs.get("spacecraft", "")
    span = span_text(times)
    heading = f"{craft}, {span}" if craft else span
    note = partial_note(ds) if partial else ""
    if note:
        import textwrap

        note = textwrap.fill(note, 110)
    if own:
        fig.suptitle(heading + ("\n" + note if note else ""), fontsize="medium")
    else:
        axes[0].set_title(heading + ": " + axes[0].get_title()
                          + ("\n" + note if note else ""), fontsize="medium")
    return fig
