r"""Survey grid: the binned variables and their histogram scales, the axes, the time windows.

Everything here is a definition or a check of the caller's settings; no file
is read. :func:`beltkit.batch.survey` bins each variable of
:data:`SURVEY_VARIABLES` found in every summary, per energy, onto the cells
of one of :data:`BINNINGS` (or any two per-time summary variables), in time
windows of :func:`window_length_ns`.

A sample with axis values :math:`(x_1, x_2)` falls in cell
:math:`k_1 n_2 + k_2` of the energy's block, :math:`k_i` being the bin of
:math:`x_i` among the axis edges :math:`e_0 < \dots < e_{n_i}`
(:math:`e_{k} \le x < e_{k+1}`, the last edge belonging to the last bin).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..aggregate import Scale

__all__ = [
    "AXES",
    "BINNINGS",
    "LOG_SPREAD",
    "SURVEY_VARIABLES",
    "Axis",
    "quantile_name",
    "quantile_scales",
    "statistic_names",
    "survey_axes",
    "window_length_ns",
]

#: Variables of a summary that :func:`beltkit.batch.survey` bins (each where every summary has it).
SURVEY_VARIABLES = (
    "fraction_precipitating",
    "fraction_quasi_trapped",
    "fraction_trapped",
    "flux_precipitating",
    "flux_quasi_trapped",
    "flux_trapped",
    "fraction_lost_north",
    "fraction_lost_south",
    "flux_lost_north",
    "flux_lost_south",
    "omni_flux",
    "loss_cone_filling",
    "diffusion_coefficient",
    "z0",
    "lifetime",
)
#: Survey variables that span decades: their median is the meaningful statistic.
LOG_SPREAD = ("diffusion_coefficient", "z0", "lifetime")
#: The named binnings: two axes each (``"L-time"``: L in time windows).
BINNINGS = ("L-MLT", "lon-lat", "L-B", "L-time")

#: The named axes: name -> (summary variable it comes from, default edges, attributes).
AXES = {
    "L": ("L", np.arange(1.0, 8.01, 0.5), {"units": "1", "long_name": "L-shell bin centre"}),
    "mlt": ("mlt", np.arange(0.0, 24.01, 1.0),
            {"units": "hour", "long_name": "magnetic local time bin centre"}),
    "lon": ("position_geo", np.arange(-180.0, 180.01, 10.0),
            {"units": "degrees_east", "standard_name": "longitude",
             "long_name": "geographic (geocentric) longitude bin centre"}),
    "lat": ("position_geo", np.arange(-90.0, 90.01, 5.0),
            {"units": "degrees_north", "standard_name": "latitude",
             "long_name": "geographic (geocentric) latitude bin centre"}),
    "b_local": ("b_local", 10.0 ** np.arange(2.0, 5.001, 0.1),
                {"units": "nT", "long_name": "local magnetic field strength bin centre"}),
}
_BINNING_AXES = {"L-MLT": ("L", "mlt"), "lon-lat": ("lon", "lat"), "L-B": ("L", "b_local"),
                 "L-time": ("L",)}


@dataclass(frozen=True)
class Axis:
    """One axis of a survey's grid.

    Attributes
    ----------
    dim : str
        Dimension name in the survey file (``"L"``, ``"mlt"``, ``"lon"``...).
    source : str
        Summary variable the values come from (``"position_geo"`` for
        ``"lon"`` and ``"lat"``).
    edges : tuple of float
        Strictly increasing bin edges.
    attrs : tuple of (str, object)
        Attributes of the bin-centre coordinate, as ``dict.items()``.
    """

    dim: str
    source: str
    edges: tuple
    attrs: tuple


def quantile_scales(bins_per_decade: int = 32, linear_bins: int = 256) -> dict:
    """Return the histogram :class:`~beltkit.aggregate.Scale` of each survey variable.

    Parameters
    ----------
    bins_per_decade : int
        Resolution of the logarithmic scales (fluxes, loss-cone filling,
        diffusion coefficient, z0, lifetime): worst-case quantile error
        :math:`10^{1/(2 n)} - 1` relative (3.7 % for 32).
    linear_bins : int
        Bins over 0-1 of the fractions: worst-case error :math:`1/(2 n)`
        absolute (0.002 for 256).

    Returns
    -------
    dict of str to Scale
        Ranges: fractions 0-1; fluxes 1e-4 to 1e12 cm-2 s-1 keV-1;
        loss-cone filling 1e-6 to 1e4; diffusion coefficient 1e-12 to 1e2
        s-1; z0 1e-4 to 1e4; lifetime 1e-2 to 1e12 s. Values outside are
        counted but give NaN quantiles (never a wrong number).

    Examples
    --------
    >>> scales = quantile_scales()
    >>> float(scales["fraction_trapped"].error_bound)  # 1 / (2 * 256)
    0.001953125
    >>> scales["omni_flux"].kind
    'log'
    """
    log = {"loss_cone_filling": (1e-6, 1e4), "diffusion_coefficient": (1e-12, 1e2),
           "z0": (1e-4, 1e4), "lifetime": (1e-2, 1e12)}
    out = {}
    for name in SURVEY_VARIABLES:
        if name.startswith("fraction"):
            out[name] = Scale.linear(0.0, 1.0, linear_bins)
        elif name in log:
            out[name] = Scale.log(*log[name], bins_per_decade)
        else:
            out[name] = Scale.log(1e-4, 1e12, bins_per_decade)
    return out


def quantile_name(q) -> str:
    """Return the statistic name of quantile `q` in the survey file (``"q5"`` for 0.05).

    Examples
    --------
    >>> quantile_name(0.05), quantile_name(0.975)
    ('q5', 'q97_5')
    """
    return f"q{round(float(q) * 100, 4):g}".replace(".", "_")


def statistic_names(quantiles) -> list:
    """Return the statistics written per cell and variable, in file order.

    Examples
    --------
    >>> statistic_names([0.1])
    ['count', 'mean', 'std', 'median', 'iqr', 'q10']
    """
    return ["count", "mean", "std", "median", "iqr", *map(quantile_name, quantiles)]


def window_length_ns(time_window):
    """Return the time-window length in nanoseconds (None for one window over all samples).

    Parameters
    ----------
    time_window : str, timedelta or None
        A duration pandas understands (``"1D"``, ``"6h"``, ``"90min"``).

    Raises
    ------
    ValueError
        If it is not a duration or not positive.

    Examples
    --------
    >>> window_length_ns("6h") == 6 * 3600 * 10**9
    True
    """
    if time_window is None:
        return None
    import pandas as pd

    try:
        w = pd.to_timedelta(time_window)
    except (ValueError, TypeError) as exc:
        raise ValueError(f"time_window {time_window!r} is not a duration (e.g. '1D', '6h', "
                         f"'90min')") from exc
    if w <= pd.Timedelta(0):
        raise ValueError(f"time_window must be positive, got {time_window!r}")
    return int(w.value)


def _edges(values, default, name):
    edges = np.asarray(default if values is None else values, dtype=float)
    if edges.ndim != 1 or edges.size < 2 or not np.all(np.diff(edges) > 0):
        raise ValueError(f"{name} must be at least two strictly increasing bin edges, "
                         f"got {values!r}")
    return edges


def survey_axes(binning, edges=None, l_edges=None, mlt_edges=None) -> list:
    """Return the binning's axes (1 or 2) with their edges checked.

    Parameters
    ----------
    binning : str or pair of str
        One of :data:`BINNINGS`, or two names of per-time summary variables.
    edges : dict, optional
        Bin edges by axis name (required for an axis not in :data:`AXES`).
    l_edges, mlt_edges : array_like, optional
        Edges of ``"L"`` and ``"mlt"`` (`edges` wins where both are given).

    Returns
    -------
    list of Axis

    Raises
    ------
    ValueError
        For an unknown binning, missing or non-increasing edges, or MLT,
        longitude or latitude edges outside their range.

    Examples
    --------
    >>> [(a.dim, len(a.edges)) for a in survey_axes("L-MLT", mlt_edges=[0, 12, 24])]
    [('L', 15), ('mlt', 3)]
    """
    edges = dict(edges or {})
    if l_edges is not None:
        edges.setdefault("L", l_edges)
    if mlt_edges is not None:
        edges.setdefault("mlt", mlt_edges)
    if isinstance(binning, str):
        if binning not in _BINNING_AXES:
            raise ValueError(f"binning must be one of {', '.join(BINNINGS)} or a pair of "
                             f"summary variable names, got {binning!r}")
        names = _BINNING_AXES[binning]
    else:
        names = tuple(binning)
        if len(names) != 2 or len(set(names)) != 2:
            raise ValueError(f"a binning by variables needs two different names, got {binning!r}")
    axes = []
    for name in names:
        if name in AXES:
            source, default, attrs = AXES[name]
        else:
            if name not in edges:
                raise ValueError(f"give the bin edges of {name!r} (edges={{{name!r}: [...]}}, "
                                 f"or --bins {name} LOW HIGH STEP)")
            source, default, attrs = name, None, {"long_name": f"{name} bin centre"}
        e = _edges(edges.get(name), default, f"{name} edges")
        if name == "mlt" and (e[0] < 0 or e[-1] > 24):
            raise ValueError(f"mlt_edges must lie within 0-24 h, got {e[0]}-{e[-1]}")
        if name == "lon" and (e[0] < -180 or e[-1] > 360):
            raise ValueError(f"longitude edges must lie within -180..360 deg, got {e[0]}-{e[-1]}")
        if name == "lat" and (e[0] < -90 or e[-1] > 90):
            raise ValueError(f"latitude edges must lie within -90..90 deg, got {e[0]}-{e[-1]}")
        axes.append(Axis(name, source, tuple(e.tolist()), tuple(attrs.items())))
    return axes
