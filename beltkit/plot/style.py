"""Shared conventions of beltkit's figures: labels, colour maps, line styles and axes helpers.

Also the detection of partially covered data (:func:`partial_coverage`) and
the notes that say so; every figure module of :mod:`beltkit.plot` draws with
these.
"""

from __future__ import annotations

import numpy as np
from matplotlib.colors import LogNorm
from matplotlib.figure import Figure

__all__ = [
    "cone_digits",
    "display_values",
    "edges_from",
    "energy_style",
    "energy_text",
    "loss_cones_at",
    "new_axes",
    "partial_coverage",
    "partial_note",
    "positive_norm",
    "quantity_label",
    "span_text",
    "time_axis",
    "time_edges",
    "time_text",
    "title_of",
    "true_runs",
    "FLUX_CMAP",
    "FLUX_LABEL",
    "FRACTION_CMAP",
    "INTEGRATED_LABEL",
    "INTEGRATED_UNIT",
    "LABELS",
    "LINESTYLES",
    "L_MASK_NOTE",
    "L_VALID_MAX",
    "MARKERS",
    "MIN_CONE_WIDTH_DEG",
    "PARTIAL_LABELS",
    "PARTIAL_NOTE",
]

FLUX_LABEL = "flux (cm$^{-2}$ s$^{-1}$ sr$^{-1}$ keV$^{-1}$)"
INTEGRATED_LABEL = "flux (cm$^{-2}$ s$^{-1}$ keV$^{-1}$)"
INTEGRATED_UNIT = "(cm$^{-2}$ s$^{-1}$ keV$^{-1}$)"
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
LINESTYLES = ("-", "--", "-.", ":")
MARKERS = ("o", "s", "^", "v", "D", "P", "X", "*")
FLUX_CMAP = "viridis"
FRACTION_CMAP = "cividis"
LABELS = {
    "fraction_precipitating": "precipitating fraction",
    "fraction_quasi_trapped": "quasi-trapped fraction",
    "fraction_trapped": "trapped fraction",
    "loss_cone_filling": "loss-cone filling ratio",
    "omni_flux": "omnidirectional " + INTEGRATED_LABEL,
    "flux_precipitating": "precipitating " + INTEGRATED_LABEL,
    "flux_quasi_trapped": "quasi-trapped " + INTEGRATED_LABEL,
    "flux_trapped": "trapped " + INTEGRATED_LABEL,
}
# the same quantities when the data cover only part of the sphere
PARTIAL_LABELS = {
    "fraction_precipitating": "precipitating fraction of the measured flux (partial coverage)",
    "fraction_quasi_trapped": "quasi-trapped fraction of the measured flux (partial coverage)",
    "fraction_trapped": "trapped fraction of the measured flux (partial coverage)",
    "loss_cone_filling": "loss-cone filling ratio (partial coverage)",
    "omni_flux": "flux over the measured solid angle " + INTEGRATED_UNIT,
    "flux_precipitating": "precipitating flux over the measured solid angle " + INTEGRATED_UNIT,
    "flux_quasi_trapped": "quasi-trapped flux over the measured solid angle " + INTEGRATED_UNIT,
    "flux_trapped": "trapped flux over the measured solid angle " + INTEGRATED_UNIT,
}
L_MASK_NOTE = "grey: L > {l_max:g}, beyond the outer belt (dipole field not valid), not shown"


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


def quantity_label(quantity, partial):
    """Return the axis label of a summary quantity (its partial-coverage form if `partial`)."""
    table = PARTIAL_LABELS if partial else LABELS
    return table.get(quantity, LABELS.get(quantity, quantity.replace("_", " ")))


def partial_note(ds=None):
    """Return the note for partially covered data (naming the instrument kind if known)."""
    who = ("the telescopes sample" if ds is not None and "flux" in ds
           and "look" in ds["flux"].dims else "the instrument samples")
    return PARTIAL_NOTE.format(who=who)


def true_runs(mask):
    """Start and end indices (inclusive) of the runs of True in a 1-D boolean array."""
    m = np.concatenate([[False], np.asarray(mask, bool), [False]])
    d = np.diff(m.astype(np.int8))
    return np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1


def span_text(times):
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
def new_axes(ax, figsize, nrows=1, ncols=1, **kwargs):
    """Return (fig, axes): the caller's axes' figure, or a new constrained figure."""
    if ax is not None:
        return ax.figure, ax
    fig = Figure(figsize=figsize, layout="constrained")
    axes = fig.subplots(nrows, ncols, squeeze=True, **kwargs)
    return fig, axes


def energy_style(k, n):
    """Colour (viridis sample), line style and marker of energy channel k of n."""
    from matplotlib import colormaps

    colour = colormaps[FLUX_CMAP](0.82 * k / max(n - 1, 1))
    return colour, LINESTYLES[k % len(LINESTYLES)], MARKERS[k % len(MARKERS)]


def time_axis(ax):
    """Concise date labels on the x axis."""
    from matplotlib.dates import AutoDateLocator, ConciseDateFormatter

    locator = AutoDateLocator(minticks=4, maxticks=9)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(ConciseDateFormatter(locator))


def display_values(v, norm):
    """Values for a log colour scale: zeros at the scale's floor, NaN (no data) masked."""
    v = np.where(np.isfinite(v) & (v <= 0), norm.vmin, v)
    return np.ma.masked_invalid(v)


def energy_text(e_kev):
    """Return an energy as text with its unit (keV or MeV)."""
    return f"{e_kev / 1000:.2g} MeV" if e_kev >= 1000 else f"{e_kev:.3g} keV"


def time_text(t):
    """Return a time as text to the second, in UTC."""
    return str(np.datetime64(t, "s")).replace("T", " ") + " UTC"


def edges_from(ds, name):
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


def time_edges(times):
    """Return cell edges between sample times (for pcolormesh)."""
    t = np.asarray(times, dtype="datetime64[ns]").astype("int64").astype(float)
    if t.size == 1:
        return np.array([t[0] - 30e9, t[0] + 30e9]).astype("int64").astype("datetime64[ns]")
    step = np.diff(t)
    edges = np.concatenate([[t[0] - step[0] / 2], t[:-1] + step / 2, [t[-1] + step[-1] / 2]])
    return edges.astype("int64").astype("datetime64[ns]")


def positive_norm(values):
    """Return a LogNorm over the finite positive values (1st to 99.9th percentile)."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v) & (v > 0)]
    if v.size == 0:
        return LogNorm(1e-1, 1e1)
    lo, hi = np.percentile(v, [1, 99.9])
    return LogNorm(max(lo, hi * 1e-7), hi)


def loss_cones_at(ds, summary, time=None):
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


def cone_digits(angle_deg):
    """Decimals that show a loss-cone angle with two significant digits (at least one)."""
    if not np.isfinite(angle_deg) or angle_deg >= 1.0:
        return 1
    return int(min(4, max(1, 1 - np.floor(np.log10(max(angle_deg, 1e-4))))))


def title_of(ds, sample=None):
    """Return a figure title: the spacecraft, and the sample's time, L and MLT."""
    craft = ds.attrs.get("spacecraft", "")
    text = craft
    if sample is not None:
        parts = [time_text(sample["time"].values)]
        if "L" in sample:
            parts.append(f"L = {float(sample['L']):.2f}")
        if "mlt" in sample:
            parts.append(f"MLT = {float(sample['mlt']):.1f} h")
        if "mlat" in sample:
            parts.append(f"MLAT = {float(sample['mlat']):.1f}°")
        text = (craft + "  " if craft else "") + ", ".join(parts)
    return text


