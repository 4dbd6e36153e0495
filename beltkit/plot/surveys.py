"""Survey maps: statistics per cell of L x MLT, geographic, L x B and L x time binnings."""

from __future__ import annotations

import numpy as np
import xarray as xr
from matplotlib.colors import LogNorm, Normalize
from matplotlib.figure import Figure

from .style import (
    FLUX_CMAP,
    FRACTION_CMAP,
    L_MASK_NOTE,
    L_VALID_MAX,
    LABELS,
    edges_from,
    energy_text,
    new_axes,
    partial_coverage,
    partial_note,
    quantity_label,
    time_axis,
    time_edges,
)

__all__ = [
    "nice_log_ticks",
    "survey_cells",
    "survey_map",
]


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
    label = quantity_label(quantity, partial)
    if kind == "L-time":
        values, total = _combine_cells(s, quantity, "mlt")
        values = values.where(total >= min_count).transpose("L", "time")
        fig, ax = new_axes(ax, (8.0, 3.6))
        t_edges = (np.concatenate([s["time_bnds"].values[:, 0], s["time_bnds"].values[-1:, 1]])
                   if "time_bnds" in s else time_edges(s["time"].values))
        x, xlabel = t_edges, "time (UTC)"
    elif kind == "L-MLT":
        values, total = _combine_cells(s, quantity, "time")
        values = values.where(total >= min_count).transpose("L", "mlt")
        if ax is None:
            fig = Figure(figsize=(5.6, 5.0), layout="constrained")
            ax = fig.add_subplot(projection="polar")
        fig = ax.figure
        m_edges = edges_from(s, "mlt")
        x = m_edges / 24.0 * 2 * np.pi
        ax.set_theta_zero_location("S")  # midnight at the bottom, noon at the top
        ax.set_theta_direction(1)  # anticlockwise: dawn (06) to the right
        ax.set_xticks(np.arange(0, 24, 6) / 24 * 2 * np.pi)
        ax.set_xticklabels(["00 MLT", "06", "12", "18"])
        xlabel = None
    else:
        raise ValueError(f"kind must be 'L-time' or 'L-MLT', got {kind!r}")
    v = np.asarray(values.values, float)
    l_edges = edges_from(s, "L")
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
    cmap = FLUX_CMAP if quantity.endswith("flux") or "flux_" in quantity else FRACTION_CMAP
    mesh = ax.pcolormesh(x, l_edges, np.ma.masked_invalid(v), norm=norm,
                         cmap=cmap, shading="flat")
    if masked_cells.any():
        from matplotlib.colors import ListedColormap

        ax.pcolormesh(x, l_edges, np.ma.masked_where(~masked_cells, masked_cells.astype(float)),
                      cmap=ListedColormap(["0.8"]), shading="flat")
    if xlabel:
        ax.set_xlabel(xlabel)
        ax.set_ylabel("L-shell")
        time_axis(ax)
        where = "L-time"
    else:
        ax.set_xlabel("magnetic local time (h); radius: L-shell" + _place_l_labels(
            ax, x, np.isfinite(v) | masked_cells, l_edges))
        where = "L-MLT"
    short = LABELS.get(quantity, label)
    if partial and quantity.startswith("fraction"):
        short = short.replace(" fraction", " fraction of the measured flux")
    elif partial:
        short = label.split(" (cm")[0]
    title = f"{short} at {energy_text(e_all[k])} ({where})"
    if all_zero:
        title += ": zero in every cell"
    notes = []
    if partial:
        notes.append(partial_note())
    if masked_cells.any():
        notes.append(L_MASK_NOTE.format(l_max=l_max))
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
            x = time_edges(s["time"].values)
    else:
        if s.sizes["time"] > 1:
            if time is None:
                raise ValueError(f"the survey has {s.sizes['time']} time windows: give time= "
                                 f"(a window's index) to map one of them")
            s = s.isel(time=int(time))
        else:
            s = s.isel(time=0)
        x_dim, y_dim = cell_dims
        x = edges_from(s, x_dim)
    y = edges_from(s, y_dim)
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
    label = quantity_label(quantity, partial)
    units = survey[name].attrs.get("units", "1")
    plain = quantity_label(quantity, False)  # the colour bar: quantity and unit only
    bar_label = plain if (quantity in LABELS or units in ("1", "")) else f"{plain} ({units})"
    for ax, v, what, lg, cmap in ((axes[0], values, bar_label, log, FLUX_CMAP),
                                  (axes[1], count, "samples per cell", None, FRACTION_CMAP)):
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
            time_axis(ax)
        if y_dim == "b_local":
            ax.set_yscale("log")
        if x_dim == "lon":
            ax.set_aspect("equal")
            ax.set_xticks(np.arange(-180, 181, 60))
            ax.set_yticks(np.arange(-90, 91, 30))
    where = survey.attrs.get("binning", f"{y_dim} x {x_dim}")
    short = label.split(" (")[0]
    note = "; light grey: 0" if zero.any() else ""
    axes[0].set_title(f"{statistic} of {short}\nat {energy_text(e_all[k])} ({where}{note})",
                      fontsize="medium")
    axes[1].set_title("samples per cell", fontsize="medium")
    return fig


_AXIS_LABELS = {"L": "L-shell", "mlt": "magnetic local time (h)",
                "lon": "geographic longitude (degree east)",
                "lat": "geographic latitude (degree north)",
                "b_local": "local field strength (nT)", "time": "time (UTC)"}


def nice_log_ticks(lo, hi, most=7):
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
    bar.set_ticks(nice_log_ticks(lo, hi))
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
