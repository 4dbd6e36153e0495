"""Figures of pitch-angle data, loss-cone summaries, surveys and field models.

Every function draws with matplotlib's object interface (no pyplot state,
so it runs headless under any backend), returns the
:class:`matplotlib.figure.Figure` it drew on, and takes an ``ax`` (or
``axes``) to draw into an existing figure. Flux colour scales are
logarithmic; colour maps are perceptually uniform and readable in greyscale
and by colour-blind readers (``viridis``, ``cividis``); lines differ by style
and marker as well as by colour; every axis and colour bar names its quantity
and unit (fractions are dimensionless and carry no unit suffix).

Data that sample only part of the sphere (telescopes, or a spectrometer with
gaps) are partitioned over the *measured* solid angle only: their fractions
and fluxes are shares of what was seen, not of the whole distribution. The
figures detect this from the data (:func:`partial_coverage`: a ``coverage_*``
below 1 or the ``partial_coverage`` bit 8 of ``partition_flag``), label such
quantities "of the measured flux" / "over the measured solid angle" and say so
in a note. Samples on field lines beyond ``L_VALID_MAX`` (L > 10: outside the
outer belt, on open or strongly stretched field lines that neither a centred
dipole nor an internal field describes) are greyed out of the fraction panels
and survey maps.

Inputs follow beltkit's conventions: a flux dataset (``flux`` on ``time``,
``energy`` and ``pitch_angle`` or ``look``), its summary from
:func:`beltkit.pad.partition` or :func:`beltkit.batch.summarize`, a survey
file from :func:`beltkit.batch.survey`, and the per-longitude loss cones of
:func:`beltkit.field.loss_cones_vs_longitude`.

Examples
--------
>>> import tempfile, beltkit.demo, beltkit.pad, xarray as xr
>>> path = beltkit.demo.generate(tempfile.mkdtemp(), n_days=1, spacecraft=("tern",))[0]
>>> ds = xr.open_dataset(path)
>>> fig = pitch_angle_distribution(ds, beltkit.pad.partition(ds), "2027-03-08T03:00")
>>> fig.axes[0].get_xlabel()
'local pitch angle (degree)'
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from matplotlib.colors import LogNorm, Normalize
from matplotlib.figure import Figure

__all__ = [
    "FLUX_LABEL",
    "L_VALID_MAX",
    "MIN_CONE_WIDTH_DEG",
    "PARTIAL_NOTE",
    "diffusion_overview",
    "energy_time",
    "field_model_comparison",
    "loss_cone_longitude",
    "partial_coverage",
    "pitch_angle_distribution",
    "pitch_angle_time",
    "spectrogram",
    "survey_cells",
    "survey_map",
]

FLUX_LABEL = "flux (cm$^{-2}$ s$^{-1}$ sr$^{-1}$ keV$^{-1}$)"
_INTEGRATED_LABEL = "flux (cm$^{-2}$ s$^{-1}$ keV$^{-1}$)"
_INTEGRATED_UNIT = "(cm$^{-2}$ s$^{-1}$ keV$^{-1}$)"
#: Highest L-shell shown in fraction panels and survey maps. Beyond it (L > 10)
#: the samples lie outside the outer belt, on open or strongly stretched field
#: lines where a centred dipole (or any internal field) is not a valid
#: description, so their L and loss cones are not meaningful.
L_VALID_MAX = 10.0
#: Narrowest shading of a loss cone on the pitch-angle plot (degree); the true edge is a line.
MIN_CONE_WIDTH_DEG = 1.5
#: Note added to figures of partially covered data.
PARTIAL_NOTE = ("partial coverage: {who} only part of the sphere; fractions and fluxes "
                "are shares of the measured solid angle, not of the whole distribution")
_LINESTYLES = ("-", "--", "-.", ":")
_MARKERS = ("o", "s", "^", "v", "D", "P", "X", "*")
_FLUX_CMAP = "viridis"
_FRACTION_CMAP = "cividis"
_LABELS = {
    "fraction_precipitating": "precipitating fraction",
    "fraction_quasi_trapped": "quasi-trapped fraction",
    "fraction_trapped": "trapped fraction",
    "loss_cone_filling": "loss-cone filling ratio",
    "omni_flux": "omnidirectional " + _INTEGRATED_LABEL,
    "flux_precipitating": "precipitating " + _INTEGRATED_LABEL,
    "flux_quasi_trapped": "quasi-trapped " + _INTEGRATED_LABEL,
    "flux_trapped": "trapped " + _INTEGRATED_LABEL,
}
# the same quantities when the data cover only part of the sphere
_PARTIAL_LABELS = {
    "fraction_precipitating": "precipitating fraction of the measured flux (partial coverage)",
    "fraction_quasi_trapped": "quasi-trapped fraction of the measured flux (partial coverage)",
    "fraction_trapped": "trapped fraction of the measured flux (partial coverage)",
    "loss_cone_filling": "loss-cone filling ratio (partial coverage)",
    "omni_flux": "flux over the measured solid angle " + _INTEGRATED_UNIT,
    "flux_precipitating": "precipitating flux over the measured solid angle " + _INTEGRATED_UNIT,
    "flux_quasi_trapped": "quasi-trapped flux over the measured solid angle " + _INTEGRATED_UNIT,
    "flux_trapped": "trapped flux over the measured solid angle " + _INTEGRATED_UNIT,
}
_L_MASK_NOTE = "grey: L > {l_max:g}, beyond the outer belt (dipole field not valid), not shown"


def partial_coverage(data) -> bool:
    """Whether a summary (or survey) comes from data covering only part of the sphere.

    True when any finite ``coverage_precipitating``, ``coverage_quasi_trapped``
    or ``coverage_trapped`` (or their survey means ``coverage_*_mean``) is
    below 1, or when any ``partition_flag`` has the ``partial_coverage`` bit
    (8) set. Then the partition's fractions and fluxes refer to the measured
    solid angle only.

    Parameters
    ----------
    data : xarray.Dataset
        Output of :func:`beltkit.pad.partition` / :func:`beltkit.batch.summarize`
        (or a survey holding coverage means).

    Returns
    -------
    bool
        False when the dataset holds no coverage information.

    Examples
    --------
    >>> import xarray as xr
    >>> partial_coverage(xr.Dataset({"coverage_trapped": ("time", [1.0, 0.6])}))
    True
    >>> partial_coverage(xr.Dataset({"partition_flag": ("time", [0, 0])}))
    False
    """
    for pop in ("precipitating", "quasi_trapped", "trapped"):
        for name in (f"coverage_{pop}", f"coverage_{pop}_mean"):
            if name in data:
                v = np.asarray(data[name].values, float)
                if np.any(v[np.isfinite(v)] < 1 - 1e-6):
                    return True
    if "partition_flag" in data:
        flags = np.asarray(data["partition_flag"].values)
        if np.any((flags.astype(np.int64) & 8) != 0):
            return True
    return False


def _quantity_label(quantity, partial):
    table = _PARTIAL_LABELS if partial else _LABELS
    return table.get(quantity, _LABELS.get(quantity, quantity.replace("_", " ")))


def _partial_note(ds=None):
    who = ("the telescopes sample" if ds is not None and "flux" in ds
           and "look" in ds["flux"].dims else "the instrument samples")
    return PARTIAL_NOTE.format(who=who)


def _runs(mask):
    """Start and end indices (inclusive) of the runs of True in a 1-D boolean array."""
    m = np.concatenate([[False], np.asarray(mask, bool), [False]])
    d = np.diff(m.astype(np.int8))
    return np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1


def _span_text(times):
    """'YYYY-MM-DD HH:MM-HH:MM UTC' (or both dates when the span crosses midnight)."""
    t = np.asarray(times, dtype="datetime64[s]")
    t = t[~np.isnat(t)]
    if t.size == 0:
        return ""
    lo, hi = str(t.min()), str(t.max())
    if lo[:10] == hi[:10]:
        return f"{lo[:10]} {lo[11:16]}–{hi[11:16]} UTC"
    return f"{lo[:10]} {lo[11:16]} – {hi[:10]} {hi[11:16]} UTC"


# --------------------------------------------------------------------------- helpers
def _new_axes(ax, figsize, nrows=1, ncols=1, **kwargs):
    """Return (fig, axes): the caller's axes' figure, or a new constrained figure."""
    if ax is not None:
        return ax.figure, ax
    fig = Figure(figsize=figsize, layout="constrained")
    axes = fig.subplots(nrows, ncols, squeeze=True, **kwargs)
    return fig, axes


def _energy_style(k, n):
    """Colour (viridis sample), line style and marker of energy channel k of n."""
    from matplotlib import colormaps

    colour = colormaps[_FLUX_CMAP](0.82 * k / max(n - 1, 1))
    return colour, _LINESTYLES[k % len(_LINESTYLES)], _MARKERS[k % len(_MARKERS)]


def _time_axis(ax):
    """Concise date labels on the x axis."""
    from matplotlib.dates import AutoDateLocator, ConciseDateFormatter

    locator = AutoDateLocator(minticks=4, maxticks=9)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(ConciseDateFormatter(locator))


def _display(v, norm):
    """Values for a log colour scale: zeros at the scale's floor, NaN (no data) masked."""
    v = np.where(np.isfinite(v) & (v <= 0), norm.vmin, v)
    return np.ma.masked_invalid(v)


def _energy_text(e_kev):
    return f"{e_kev / 1000:.2g} MeV" if e_kev >= 1000 else f"{e_kev:.3g} keV"


def _time_text(t):
    return str(np.datetime64(t, "s")).replace("T", " ") + " UTC"


def _edges_from(ds, name):
    """Cell edges of coordinate `name` from its CF bounds, else from mid-points."""
    bounds = ds[name].attrs.get("bounds")
    if bounds and bounds in ds.variables:
        b = np.asarray(ds[bounds].values, dtype=float)
        return np.concatenate([b[:, 0], b[-1:, 1]])
    c = np.asarray(ds[name].values, dtype=float)
    if c.size == 1:
        return np.array([c[0] * 0.9, c[0] * 1.1])
    mid = 0.5 * (c[:-1] + c[1:])
    return np.concatenate([[2 * c[0] - mid[0]], mid, [2 * c[-1] - mid[-1]]])


def _time_edges(times):
    t = np.asarray(times, dtype="datetime64[ns]").astype("int64").astype(float)
    if t.size == 1:
        return np.array([t[0] - 30e9, t[0] + 30e9]).astype("int64").astype("datetime64[ns]")
    step = np.diff(t)
    edges = np.concatenate([[t[0] - step[0] / 2], t[:-1] + step / 2, [t[-1] + step[-1] / 2]])
    return edges.astype("int64").astype("datetime64[ns]")


def _positive_norm(values):
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v) & (v > 0)]
    if v.size == 0:
        return LogNorm(1e-1, 1e1)
    lo, hi = np.percentile(v, [1, 99.9])
    return LogNorm(max(lo, hi * 1e-7), hi)


def _loss_cones_at(ds, summary, time=None):
    """Return the loss-cone angles (deg) for one time (or all times) as a dict.

    Keys: north, south (direction-resolved local bounce loss cones), blc and
    dlc (local bounce and drift loss cones). From the summary when given,
    else from the dataset's dipole position (beltkit.dipole).
    """
    sel = {} if time is None else {"time": time}
    if summary is not None and "blc_local" in summary:
        s = summary.sel(sel, method="nearest") if sel else summary
        blc = np.asarray(s["blc_local"].values, float)
        out = {"blc": blc,
               "dlc": np.asarray(s["dlc_local"].values, float) if "dlc_local" in s else blc}
        out["north"] = (np.asarray(s["loss_cone_north"].values, float)
                        if "loss_cone_north" in s else blc)
        out["south"] = (np.asarray(s["loss_cone_south"].values, float)
                        if "loss_cone_south" in s else blc)
        return out
    if "L" in ds and "mlat" in ds:
        from . import dipole

        d = ds.sel(sel, method="nearest") if sel else ds
        blc = np.asarray(dipole.local_loss_cone(np.asarray(d["L"].values, float),
                                                np.asarray(d["mlat"].values, float)), float)
        return {"blc": blc, "dlc": blc, "north": blc, "south": blc}
    return None


def _cone_digits(angle_deg):
    """Decimals that show a loss-cone angle with two significant digits (at least one)."""
    if not np.isfinite(angle_deg) or angle_deg >= 1.0:
        return 1
    return int(min(4, max(1, 1 - np.floor(np.log10(max(angle_deg, 1e-4))))))


def _title(ds, sample=None):
    craft = ds.attrs.get("spacecraft", "")
    text = craft
    if sample is not None:
        parts = [_time_text(sample["time"].values)]
        if "L" in sample:
            parts.append(f"L = {float(sample['L']):.2f}")
        if "mlt" in sample:
            parts.append(f"MLT = {float(sample['mlt']):.1f} h")
        if "mlat" in sample:
            parts.append(f"MLAT = {float(sample['mlat']):.1f}°")
        text = (craft + "  " if craft else "") + ", ".join(parts)
    return text


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
    fig, ax = _new_axes(ax, (7.0, 4.6))
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
        edges = _edges_from(ds, "pitch_angle")
        xerr = np.vstack([x - edges[:-1], edges[1:] - x])
        order = np.arange(x.size)
        angle_dim = "pitch_angle"
    cones = _loss_cones_at(ds, summary, time)
    if cones is not None:
        north, south = float(cones["north"]), float(cones["south"])
        dlc = float(cones["dlc"])
        # a narrow cone is shaded at least MIN_CONE_WIDTH_DEG wide (and its true edge drawn
        # as a line), so that a cone of a fraction of a degree does not vanish on 0-180 deg
        narrow = min(north, south) < MIN_CONE_WIDTH_DEG
        ax.axvspan(0, max(north, MIN_CONE_WIDTH_DEG), facecolor="0.75", edgecolor="0.35",
                   hatch="//", lw=0,
                   label=f"bounce loss cone: {north:.{_cone_digits(north)}f}° north-going / "
                         f"{south:.{_cone_digits(south)}f}° south-going"
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
        colour, ls, marker = _energy_style(rank, len(idx))
        y = np.asarray(sample["flux"].isel(energy=k).transpose(angle_dim).values, float)
        yerr = None
        if errorbars and "flux_err" in sample:
            yerr = np.asarray(sample["flux_err"].isel(energy=k).transpose(angle_dim).values,
                              float)
        xe = xerr if telescope else xerr
        ax.errorbar(x[order], y[order], yerr=None if yerr is None else yerr[order],
                    xerr=xe[order] if telescope else xe[:, order], color=colour, ls=ls,
                    marker=marker, ms=4, lw=1.3, capsize=0, elinewidth=0.7,
                    label=_energy_text(e_all[k]))
    ax.set_yscale("log")
    lo, hi = ax.get_ylim()
    ax.set_ylim(lo, hi * (hi / lo) ** 0.25)  # head room for the legend
    ax.set_xlim(0, 180)
    ax.set_xticks(np.arange(0, 181, 30))
    ax.set_xlabel("local pitch angle (degree)")
    ax.set_ylabel("directional " + FLUX_LABEL)
    ax.set_title(_title(ds, sample), fontsize="medium")
    ax.legend(fontsize="small", ncols=2 if len(idx) > 4 else 1, loc="best", framealpha=0.85)
    return fig


# --------------------------------------------------------------------------- spectrograms
def energy_time(ds, *, pitch_angle=None, summary=None, ax=None, cmap=_FLUX_CMAP):
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
    fig, ax = _new_axes(ax, (8.0, 3.4))
    if pitch_angle is None and summary is not None and "omni_flux" in summary:
        values = summary["omni_flux"].transpose("time", "energy")
        if partial_coverage(summary):
            label = _PARTIAL_LABELS["omni_flux"].replace(" (cm", "\n(cm")
            what = "flux over the measured solid angle (partial coverage)"
        else:
            label, what = "omnidirectional " + _INTEGRATED_LABEL, "omnidirectional"
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
    norm = _positive_norm(v)
    mesh = ax.pcolormesh(_time_edges(ds["time"].values), _edges_from(ds, "energy"),
                         _display(v, norm).T, norm=norm, cmap=cmap, shading="flat",
                         rasterized=True)
    _time_axis(ax)
    ax.set_yscale("log")
    ax.set_ylabel("energy (keV)")
    ax.set_xlabel("time (UTC)")
    ax.set_title(f"{ds.attrs.get('spacecraft', '')} energy-time, {what}".strip(),
                 fontsize="medium")
    fig.colorbar(mesh, ax=ax, label=label, pad=0.01)
    return fig


def pitch_angle_time(ds, energy, *, summary=None, ax=None, cmap=_FLUX_CMAP):
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
    fig, ax = _new_axes(ax, (8.0, 3.4))
    k = int(np.argmin(np.abs(ds["energy"].values - float(energy))))
    e_kev = float(ds["energy"].values[k])
    times = ds["time"].values
    if "look" in ds["flux"].dims:
        flux = np.asarray(ds["flux"].isel(energy=k).transpose("time", "look").values, float)
        pa = np.asarray(ds["look_pitch_angle"].transpose("time", "look").values, float)
        tt = np.broadcast_to(times[:, None], pa.shape)
        good = np.isfinite(flux) & np.isfinite(pa)
        norm = _positive_norm(flux)
        mesh = ax.scatter(tt[good], pa[good], c=_display(flux[good], norm), s=5, marker="s",
                          lw=0, norm=norm, cmap=cmap, rasterized=True)
    else:
        v = np.asarray(ds["flux"].isel(energy=k).transpose("time", "pitch_angle").values, float)
        norm = _positive_norm(v)
        mesh = ax.pcolormesh(_time_edges(times), _edges_from(ds, "pitch_angle"),
                             _display(v, norm).T, norm=norm, cmap=cmap, shading="flat",
                             rasterized=True)
    cones = _loss_cones_at(ds, summary)
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
    _time_axis(ax)
    ax.set_ylabel("local pitch angle (degree)")
    ax.set_xlabel("time (UTC)")
    ax.set_title(f"{ds.attrs.get('spacecraft', '')} pitch-angle-time at "
                 f"{_energy_text(e_kev)}".strip(), fontsize="medium")
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
            colour, ls, _ = _energy_style(k, e_all.size)
            ax.plot(s_times, fv[:, k], color=colour, ls=ls, lw=1.1, label=_energy_text(e))
            if band:
                ax.fill_between(s_times, fv[:, k] - ev[:, k], fv[:, k] + ev[:, k],
                                color=colour, alpha=0.25, lw=0)
        ylabel = _quantity_label("fraction_precipitating", partial)
        if "fraction_quasi_trapped" in summary:  # drawn where the model gives it (not a dipole)
            qv = np.where(keep[:, None], np.asarray(summary["fraction_quasi_trapped"].transpose(
                "time", "energy").values, float), np.nan)
            if np.any(np.isfinite(qv) & (qv > 0)):
                kq = int(np.argmin(np.abs(e_all - energy)))
                ax.plot(s_times, qv[:, kq], color="black", lw=1.8, ls="-", zorder=3,
                        label=f"quasi-trapped, {_energy_text(e_all[kq])}")
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
    first, last = _runs(beyond)
    if first.size:
        edges = _time_edges(times)
        for i, j in zip(first, last):
            ax.axvspan(edges[i], edges[j + 1], facecolor="0.82", edgecolor="none", zorder=0)
        ax.set_title(_L_MASK_NOTE.format(l_max=l_max), fontsize="small",
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
    _time_axis(ax)
    for a in axes[:2]:
        a.set_xlabel("")
    craft = ds.attrs.get("spacecraft", "")
    span = _span_text(times)
    heading = f"{craft}, {span}" if craft else span
    note = _partial_note(ds) if partial else ""
    if note:
        import textwrap

        note = textwrap.fill(note, 110)
    if own:
        fig.suptitle(heading + ("\n" + note if note else ""), fontsize="medium")
    else:
        axes[0].set_title(heading + ": " + axes[0].get_title()
                          + ("\n" + note if note else ""), fontsize="medium")
    return fig


# --------------------------------------------------------------------------- survey
def _combine_cells(survey, quantity, dims):
    """Mean of `quantity` over `dims`, weighting each cell's mean by its sample count."""
    mean = survey[f"{quantity}_mean"]
    count = survey[f"{quantity}_count"].where(np.isfinite(mean), 0)
    total = count.sum(dims)
    combined = (mean.fillna(0) * count).sum(dims) / total.where(total > 0)
    return combined, total


def survey_map(survey, quantity="fraction_precipitating", *, energy=None, kind="L-time",
               ax=None, vmin=None, vmax=None, log=None, min_count=1, l_max=L_VALID_MAX,
               partial=None):
    """Map a survey quantity over L and time (or over L and MLT).

    Cells hold the sample-count-weighted mean of the survey's per-cell means
    (over MLT for an L-time map, over time windows for an L-MLT map, which is
    drawn as a polar dial: noon at the top, dusk to the left, radius L).

    Parameters
    ----------
    survey : xarray.Dataset or str or os.PathLike
        Survey dataset (or file) from :func:`beltkit.batch.survey`.
    quantity : str
        Survey variable stem, e.g. ``"fraction_precipitating"``,
        ``"fraction_quasi_trapped"``, ``"omni_flux"``.
    energy : float, optional
        Energy in keV (nearest channel); default the lowest.
    kind : {"L-time", "L-MLT"}
        Map type.
    ax : matplotlib.axes.Axes, optional
        Axes to draw into (polar axes for ``"L-MLT"``).
    vmin, vmax : float, optional
        Colour limits.
    log : bool, optional
        Log colour scale (default: True for fluxes and fractions).
    min_count : int
        Cells with fewer samples are left blank.
    l_max : float or None
        Cells whose L-bin lies above this L-shell (default
        :data:`L_VALID_MAX`, 10) are not coloured but drawn grey where they
        hold data, and the title says so; None shows every cell.
    partial : bool, optional
        Whether the survey's summaries come from partially covered data
        (then fractions and fluxes are labelled as shares of the measured
        solid angle and the title carries a note). Default: detected with
        :func:`partial_coverage` from coverage means in the survey, if any;
        a survey without them counts as fully covered, so pass
        ``partial=any(partial_coverage(s) for s in summaries)``.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if not isinstance(survey, xr.Dataset):
        survey = xr.load_dataset(survey)
    if f"{quantity}_mean" not in survey:
        have = sorted(n[:-5] for n in survey.data_vars if n.endswith("_mean"))
        raise KeyError(f"survey has no {quantity!r}; it has {have}")
    e_all = np.asarray(survey["energy"].values, float)
    k = 0 if energy is None else int(np.argmin(np.abs(e_all - float(energy))))
    s = survey.isel(energy=k)
    partial = partial_coverage(survey) if partial is None else bool(partial)
    label = _quantity_label(quantity, partial)
    if kind == "L-time":
        values, total = _combine_cells(s, quantity, "mlt")
        values = values.where(total >= min_count).transpose("L", "time")
        fig, ax = _new_axes(ax, (8.0, 3.6))
        t_edges = (np.concatenate([s["time_bnds"].values[:, 0], s["time_bnds"].values[-1:, 1]])
                   if "time_bnds" in s else _time_edges(s["time"].values))
        x, xlabel = t_edges, "time (UTC)"
    elif kind == "L-MLT":
        values, total = _combine_cells(s, quantity, "time")
        values = values.where(total >= min_count).transpose("L", "mlt")
        if ax is None:
            fig = Figure(figsize=(5.6, 5.0), layout="constrained")
            ax = fig.add_subplot(projection="polar")
        fig = ax.figure
        m_edges = _edges_from(s, "mlt")
        x = m_edges / 24.0 * 2 * np.pi
        ax.set_theta_zero_location("S")  # midnight at the bottom, noon at the top
        ax.set_theta_direction(1)  # anticlockwise: dawn (06) to the right
        ax.set_xticks(np.arange(0, 24, 6) / 24 * 2 * np.pi)
        ax.set_xticklabels(["00 MLT", "06", "12", "18"])
        xlabel = None
    else:
        raise ValueError(f"kind must be 'L-time' or 'L-MLT', got {kind!r}")
    v = np.asarray(values.values, float)
    l_edges = _edges_from(s, "L")
    masked_cells = np.zeros(v.shape, bool)
    if l_max is not None:
        above = l_edges[:-1] >= l_max - 1e-9  # the whole L-bin lies above the limit
        masked_cells = above[:, None] & np.isfinite(v)
        v = np.where(above[:, None], np.nan, v)
    finite = v[np.isfinite(v)]
    if log is None:
        log = quantity.startswith(("fraction", "flux", "omni", "loss_cone"))
    all_zero = finite.size > 0 and not np.any(finite != 0)
    if all_zero:
        log = False
        vmin, vmax = (0.0, 1.0) if vmin is None and vmax is None else (vmin, vmax)
    if log:
        pos = finite[finite > 0]
        lo = vmin if vmin is not None else (pos.min() if pos.size else 1e-4)
        hi = vmax if vmax is not None else (pos.max() if pos.size else 1.0)
        if not hi > lo:  # one value: a narrow range around it, not a forced decade
            lo, hi = lo / 1.05, lo * 1.05
        norm = LogNorm(lo, hi)
        v = np.where(v > 0, v, np.nan)
    else:
        norm = Normalize(vmin if vmin is not None else (finite.min() if finite.size else 0),
                         vmax if vmax is not None else (finite.max() if finite.size else 1))
    cmap = _FLUX_CMAP if quantity.endswith("flux") or "flux_" in quantity else _FRACTION_CMAP
    mesh = ax.pcolormesh(x, l_edges, np.ma.masked_invalid(v), norm=norm,
                         cmap=cmap, shading="flat")
    if masked_cells.any():
        from matplotlib.colors import ListedColormap

        ax.pcolormesh(x, l_edges, np.ma.masked_where(~masked_cells, masked_cells.astype(float)),
                      cmap=ListedColormap(["0.8"]), shading="flat")
    if xlabel:
        ax.set_xlabel(xlabel)
        ax.set_ylabel("L-shell")
        _time_axis(ax)
        where = "L-time"
    else:
        ax.set_xlabel("magnetic local time (h); radius: L-shell" + _place_l_labels(
            ax, x, np.isfinite(v) | masked_cells, l_edges))
        where = "L-MLT"
    short = _LABELS.get(quantity, label)
    if partial and quantity.startswith("fraction"):
        short = short.replace(" fraction", " fraction of the measured flux")
    elif partial:
        short = label.split(" (cm")[0]
    title = f"{short} at {_energy_text(e_all[k])} ({where})"
    if all_zero:
        title += ": zero in every cell"
    notes = []
    if partial:
        notes.append(_partial_note())
    if masked_cells.any():
        notes.append(_L_MASK_NOTE.format(l_max=l_max))
    if notes:
        import textwrap

        width = 64 if kind == "L-MLT" else 110
        title += "\n" + "\n".join(textwrap.fill(n, width) for n in notes)
    ax.set_title(title, fontsize="medium" if not notes else "small")
    bar = fig.colorbar(mesh, ax=ax, label=label, pad=0.08 if kind == "L-MLT" else 0.01,
                       shrink=0.6 if kind == "L-MLT" else 0.85)
    if isinstance(norm, LogNorm):
        _log_ticks(bar, norm.vmin, norm.vmax)
    return fig


def survey_cells(survey, quantity="flux_precipitating", *, energy=None, statistic="median",
                 time=None, min_count=1, log=None, partial=False, axes=None):
    """Map one survey statistic over the survey's two binning axes, with the count per cell.

    Works for every binning of :func:`beltkit.batch.survey`: L x MLT,
    geographic longitude x latitude (a plain longitude-latitude grid, no
    coastlines), L x local field strength, L x time, or a pair of summary
    variables. The first panel shows the statistic, the second the number of
    samples per cell (empty cells are left blank in both).

    Parameters
    ----------
    survey : xarray.Dataset or str or os.PathLike
        Survey dataset (or file) from :func:`beltkit.batch.survey`.
    quantity : str
        Survey variable stem, e.g. ``"flux_precipitating"``, ``"fraction_trapped"``.
    energy : float, optional
        Energy in keV (nearest channel); default the lowest.
    statistic : {"median", "mean", "std", "iqr", "count"} or str
        Which per-cell statistic (any ``<quantity>_<statistic>`` variable).
    time : int, optional
        Index of the time window for a survey with several windows and two
        binning axes (statistics of separate windows cannot be merged into
        one map); ignored for an L x time survey, whose x axis is time.
    min_count : int
        Cells with fewer samples are left blank.
    log : bool, optional
        Logarithmic colour scale. Default: for fluxes and the diffusion
        outputs (cells of exactly zero are then drawn light grey, as the
        title says); linear for fractions. Colour-bar ticks stay labelled
        whether the values span a factor of two or ten decades.
    partial : bool
        Whether the summaries come from partially covered data (telescopes):
        fractions and fluxes are then labelled as shares of the measured
        solid angle.
    axes : sequence of two matplotlib.axes.Axes, optional
        Where to draw the statistic and the count.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if not isinstance(survey, xr.Dataset):
        survey = xr.load_dataset(survey)
    name = f"{quantity}_{statistic}"
    if name not in survey or f"{quantity}_count" not in survey:
        have = sorted(n[:-6] for n in survey.data_vars if n.endswith("_count"))
        raise KeyError(f"survey has no {name!r}; its quantities are {have}")
    e_all = np.asarray(survey["energy"].values, float)
    k = 0 if energy is None else int(np.argmin(np.abs(e_all - float(energy))))
    s = survey.isel(energy=k)
    cell_dims = [d for d in s[name].dims if d != "time"]
    if len(cell_dims) == 1:  # L x time: time along x
        y_dim, x_dim = cell_dims[0], "time"
        if "time_bnds" in s:
            b = s["time_bnds"].values
            x = np.concatenate([b[:, 0], b[-1:, 1]])
        else:
            x = _time_edges(s["time"].values)
    else:
        if s.sizes["time"] > 1:
            if time is None:
                raise ValueError(f"the survey has {s.sizes['time']} time windows: give time= "
                                 f"(a window's index) to map one of them")
            s = s.isel(time=int(time))
        else:
            s = s.isel(time=0)
        x_dim, y_dim = cell_dims
        x = _edges_from(s, x_dim)
    y = _edges_from(s, y_dim)
    count = s[f"{quantity}_count"].transpose(y_dim, x_dim).values.astype(float)
    values = s[name].transpose(y_dim, x_dim).values.astype(float)
    values = np.where(count >= max(min_count, 1), values, np.nan)
    count = np.where(count > 0, count, np.nan)
    if axes is None:
        geo = x_dim == "lon"
        fig = Figure(figsize=(11.0, 4.2 if geo else 3.8), layout="constrained")
        axes = fig.subplots(1, 2)
    fig = axes[0].figure
    finite = values[np.isfinite(values)]
    if log is None:
        log = (statistic != "count" and not quantity.startswith("fraction")
               and bool(np.any(finite > 0)))
    zero = np.isfinite(values) & (values <= 0) if log else np.zeros(values.shape, bool)
    if log:
        values = np.where(zero, np.nan, values)
    label = _quantity_label(quantity, partial)
    units = survey[name].attrs.get("units", "1")
    plain = _quantity_label(quantity, False)  # the colour bar: quantity and unit only
    bar_label = plain if (quantity in _LABELS or units in ("1", "")) else f"{plain} ({units})"
    for ax, v, what, lg, cmap in ((axes[0], values, bar_label, log, _FLUX_CMAP),
                                  (axes[1], count, "samples per cell", None, _FRACTION_CMAP)):
        fin = v[np.isfinite(v)]
        if lg is None:  # counts: log once they span more than a factor of ten
            lg = fin.size > 0 and fin.min() > 0 and fin.max() / fin.min() > 10
        if lg and fin.size and fin.min() > 0:
            lo, hi = fin.min(), fin.max()
            if not hi > lo:
                lo, hi = lo / 1.05, lo * 1.05
            norm = LogNorm(lo, hi)
        else:
            lo, hi = (fin.min(), fin.max()) if fin.size else (0.0, 1.0)
            norm = Normalize(lo, hi if hi > lo else lo + 1.0)
        mesh = ax.pcolormesh(x, y, np.ma.masked_invalid(v), norm=norm, cmap=cmap,
                             shading="flat")
        if ax is axes[0] and zero.any():
            from matplotlib.colors import ListedColormap

            ax.pcolormesh(x, y, np.ma.masked_where(~zero, zero.astype(float)),
                          cmap=ListedColormap(["0.85"]), shading="flat")
        bar = fig.colorbar(mesh, ax=ax, label=what, shrink=0.6 if x_dim == "lon" else 0.9,
                           pad=0.01)
        if isinstance(norm, LogNorm):
            _log_ticks(bar, norm.vmin, norm.vmax)
        ax.set_xlabel(_AXIS_LABELS.get(x_dim, x_dim))
        ax.set_ylabel(_AXIS_LABELS.get(y_dim, y_dim))
        if x_dim == "time":
            _time_axis(ax)
        if y_dim == "b_local":
            ax.set_yscale("log")
        if x_dim == "lon":
            ax.set_aspect("equal")
            ax.set_xticks(np.arange(-180, 181, 60))
            ax.set_yticks(np.arange(-90, 91, 30))
    where = survey.attrs.get("binning", f"{y_dim} x {x_dim}")
    short = label.split(" (")[0]
    note = "; light grey: 0" if zero.any() else ""
    axes[0].set_title(f"{statistic} of {short}\nat {_energy_text(e_all[k])} ({where}{note})",
                      fontsize="medium")
    axes[1].set_title("samples per cell", fontsize="medium")
    return fig


_AXIS_LABELS = {"L": "L-shell", "mlt": "magnetic local time (h)",
                "lon": "geographic longitude (degree east)",
                "lat": "geographic latitude (degree north)",
                "b_local": "local field strength (nT)", "time": "time (UTC)"}


def _nice_log_ticks(lo, hi, most=7):
    """Tick values in [lo, hi] at 1 (or 1, 2, 5, or finer) times powers of ten.

    The coarsest set with three ticks or more is taken (two when even the
    finest has no third), so that a colour scale spanning a factor of three
    still has labelled ticks.
    """
    fallback = np.array([lo, hi])
    for mantissas in ((1.0,), (1.0, 2.0, 5.0), (1.0, 1.5, 2.0, 3.0, 5.0, 7.0),
                      tuple(np.round(np.arange(1.0, 10.0, 0.5), 1)),
                      tuple(np.round(np.arange(1.0, 10.0, 0.1), 1))):
        k = np.arange(np.floor(np.log10(lo)) - 1, np.ceil(np.log10(hi)) + 1)
        cand = np.unique((np.asarray(mantissas)[None, :] * 10.0 ** k[:, None]).ravel())
        ticks = cand[(cand >= lo * (1 - 1e-9)) & (cand <= hi * (1 + 1e-9))]
        if ticks.size > most:
            ticks = ticks[:: -(-ticks.size // most)]
        if ticks.size >= 3:
            return ticks
        if ticks.size == 2 and fallback.size == 2 and fallback[0] == lo:
            fallback = ticks
    return fallback


def _log_ticks(bar, lo, hi):
    """Readable labelled ticks on a log colour bar whatever its range."""
    from matplotlib.ticker import FuncFormatter, NullLocator

    if hi / lo >= 100:  # two decades or more: matplotlib's own decade ticks read well
        return
    bar.set_ticks(_nice_log_ticks(lo, hi))
    bar.ax.yaxis.set_minor_locator(NullLocator())
    bar.ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:.3g}"))


def _place_l_labels(ax, theta_edges, has_data, l_edges):
    """Put the polar L labels off the data; return a suffix for the axis label, or "".

    The labels go in the MLT sector where the most ring labels fall on
    cells without data (ties: the sector with fewest data cells, so an empty
    sector wins). Ring labels that would still sit on data there are left
    blank, and the ring values are then returned for the axis label.
    """
    has_data = np.asarray(has_data, bool)  # (L, mlt)
    ticks = np.array([t for t in ax.get_yticks() if l_edges[0] < t < l_edges[-1]])
    if ticks.size == 0:
        return ""
    # a label at L = t covers the cells on both sides of the ring
    below = np.clip(np.searchsorted(l_edges, ticks, side="left") - 1, 0, has_data.shape[0] - 1)
    above = np.clip(np.searchsorted(l_edges, ticks, side="right") - 1, 0,
                    has_data.shape[0] - 1)
    on_data = has_data[below] | has_data[above]  # (tick, mlt)
    free = (~on_data).sum(axis=0)
    score = free * (has_data.shape[0] + 1) - has_data.sum(axis=0)
    best = int(np.argmax(score))
    mid = 0.5 * (theta_edges[best] + theta_edges[best + 1])
    # in the data's angle (set_rlabel_position composes it with the data transform)
    ax.set_rlabel_position(np.degrees(mid) % 360.0)
    ax.set_yticks(ticks)
    ax.set_yticklabels(["" if on_data[k, best] else f"{t:g}" for k, t in enumerate(ticks)])
    if not on_data[:, best].any():
        return ""
    return "\nrings: L = " + ", ".join(f"{t:g}" for t in ticks)


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
        Footpoint altitude in km.
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
        from .field import as_model
        from .field.losscone import loss_cones_vs_longitude

        data = {}
        for m in models:
            model = as_model(m)
            data[getattr(model, "name", str(m))] = loss_cones_vs_longitude(
                model, L, np.datetime64(time, "ns"), altitude_km=altitude_km, n_lon=n_lon)
    fig, ax = _new_axes(ax, (7.0, 4.0))
    from matplotlib import colormaps

    cmap = colormaps[_FRACTION_CMAP]
    for k, (name, d) in enumerate(data.items()):
        colour = cmap(0.1 + 0.55 * k / max(len(data) - 1, 1))
        marker = _MARKERS[k % len(_MARKERS)]
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


__all__.append("psd_radial_profiles")


def psd_radial_profiles(profiles, *, ax=None, cmap=_FLUX_CMAP):
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
    from matplotlib.colors import Normalize

    fig, ax = _new_axes(ax, (7.0, 4.5))
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
    bar.set_label(f"hours after {_time_text(times.min())}")
    ax.grid(alpha=0.3)
    return fig


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
    from .diffusion import loss_cone_profile

    if axes is None:
        fig, axes = _new_axes(None, (11.0, 4.5), 1, 2)
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
    ax_d.set_title(f"{_energy_text(e_all[k])}: D with its interval (loss time {loss_time})",
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
    ax_p.set_title(f"{_time_text(times[i])}, alpha0 = {a0:.3g} deg", fontsize="medium")
    ax_p.grid(alpha=0.3)
    ax_p.legend(fontsize="small", loc="lower right")
    return fig


def _measured_profile(ax, ds, result, i, k, a0, z0):
    """Draw the measured bins (or looks) of sample i, energy k, scaled onto the fit."""
    from .diffusion import loss_cone_profile

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
    _time_axis(ax_c)
    return fig


__all__.append("sector_coverage")


def sector_coverage(sectored, binned=None, *, time=None, energy=None, field=None, axes=None):
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
    field : FieldModel or str, optional
        As for :func:`beltkit.pad.bin_sectors`.
    axes : pair of matplotlib.axes.Axes, optional
        Where to draw.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from .pad import bin_sectors, sector_bands

    t_index = 0 if time is None else int(np.argmin(np.abs(
        sectored["time"].values - np.datetime64(time, "ns"))))
    one = sectored.isel(time=[t_index])
    if binned is None:
        binned = bin_sectors(one, np.linspace(0.0, 180.0, 13), field=field)
    else:
        binned = binned.sel(time=one["time"].values)
    e_values = binned["energy"].values
    e_index = e_values.size // 2 if energy is None else int(np.argmin(np.abs(e_values -
                                                                             energy)))
    bands = sector_bands(one, field=field).isel(time=0)
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
        colour, style, marker = _energy_style(d, n_d)
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
    ax_d.set_title(f"{_energy_text(float(e_values[e_index]))}, "
                   f"{_time_text(one['time'].values[0])}"
                   + (" (grey: unsampled)" if unsampled.any() else ""))
    ax_d.legend(fontsize="small", loc="best")
    return fig
