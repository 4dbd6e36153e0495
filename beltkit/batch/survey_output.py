r"""Survey output: the survey file's dataset (cells, statistics, attributes) from reduced windows.

Coordinates are the window centres (``time`` with ``time_bnds``), the
energies (with ``energy_bnds`` when the summaries have them) and the bin
centres of each axis with its ``<axis>_bnds``: arithmetic centres
:math:`(e_k + e_{k+1})/2`, geometric :math:`\sqrt{e_k e_{k+1}}` for the
logarithmic ``b_local`` axis. Per variable ``v`` and statistic ``s`` the
variable ``v_s`` has dims ``(time, energy, <axis 1>[, <axis 2>])``; every
quantile-like statistic carries its worst-case error
(:attr:`beltkit.aggregate.Scale.error_bound`).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import xarray as xr

from .. import __version__
from .survey_grid import LOG_SPREAD, quantile_name, statistic_names

__all__ = ["survey_dataset"]


def _var_attrs(path, name) -> dict:
    with xr.open_dataset(path, engine="netcdf4", chunks=None) as ds:
        return dict(ds[name].attrs)


def survey_dataset(final, *, spec, infos, windows, binning, time_window,
                   checksums) -> xr.Dataset:
    """Return the survey's dataset from the reduced windows.

    Parameters
    ----------
    final : dict
        Window position -> variable -> statistic -> array (n_cells,)
        (:func:`beltkit.batch.survey_fold.reduce_window`); windows missing
        here have count 0 and NaN statistics.
    spec : dict
        The survey's spec (:mod:`beltkit.batch.survey_fold`).
    infos : list of (pathlib.Path, dict)
        The summaries and their headers
        (:func:`beltkit.batch.survey_inputs.check_summaries`); the first
        one's energies and attributes are used.
    windows : (array, array)
        Start and end of each window (ns since 1970).
    binning : str or pair of str
        As given to :func:`beltkit.batch.survey` (recorded).
    time_window : str, timedelta or None
        As given (recorded).
    checksums : dict
        File name -> SHA-256, in input order (``source_sha256``).

    Returns
    -------
    xarray.Dataset
    """
    axes, names, n_e, quantiles = spec["axes"], spec["names"], spec["n_e"], spec["quantiles"]
    ref = infos[0][1]
    win_starts, win_ends = windows
    sizes = [len(a.edges) - 1 for a in axes]
    n_cells = n_e * int(np.prod(sizes))
    n_w = len(win_starts)
    dims = ("time", "energy", *(a.dim for a in axes))
    shape = (n_w, n_e, *sizes)
    t_mid = (win_starts + (win_ends - win_starts) // 2).astype("datetime64[ns]")
    t_bnds = np.stack([win_starts, win_ends], -1).astype("datetime64[ns]")
    data_vars = {"time_bnds": (("time", "nv"), t_bnds)}
    coords = {"time": ("time", t_mid, {"standard_name": "time",
                                       "long_name": "time window centre",
                                       "bounds": "time_bnds"})}
    for ax in axes:
        e = np.asarray(ax.edges)
        attrs = dict(ax.attrs)
        if "units" not in attrs:  # an axis by a summary variable: that variable's units
            attrs["units"] = _var_attrs(infos[0][0], ax.source).get("units", "1")
        attrs["bounds"] = f"{ax.dim}_bnds"
        mid = np.sqrt(e[:-1] * e[1:]) if ax.dim == "b_local" else 0.5 * (e[:-1] + e[1:])
        coords[ax.dim] = (ax.dim, mid, attrs)
        data_vars[f"{ax.dim}_bnds"] = ((ax.dim, "nv"), np.stack([e[:-1], e[1:]], -1),
                                       {"units": attrs.get("units", "1")})
    energy_attrs = {k: v for k, v in ref["energy_attrs"].items()
                    if k in ("units", "long_name", "standard_name")}
    energy_attrs.setdefault("units", "keV")
    energy_attrs.setdefault("long_name", "kinetic energy")
    if ref["energy_bnds"] is not None and np.shape(ref["energy_bnds"]) == (n_e, 2):
        data_vars["energy_bnds"] = (("energy", "nv"), np.asarray(ref["energy_bnds"], float),
                                    {"units": energy_attrs["units"]})
        energy_attrs["bounds"] = "energy_bnds"
    coords["energy"] = ("energy", ref["energy"], energy_attrs)
    methods = "time: " + " ".join(f"{a.dim}:" for a in axes)
    for n in names:
        stack = {}
        for st in statistic_names(quantiles):
            arr = np.full((n_w, n_cells), 0 if st == "count" else np.nan,
                          np.int64 if st == "count" else float)
            for w, r in final.items():
                arr[int(w)] = r[n][st]
            stack[st] = arr.reshape(shape)
        units = str(ref["attrs"][n].get("units", "1"))
        label = ref["attrs"][n].get("long_name", n.replace("_", " "))
        scale = spec["scales"][n]
        bound = {"quantile_error_bound": scale.error_bound,
                 "quantile_error_kind": "absolute" if scale.kind == "linear" else "relative",
                 "quantile_method": (f"{scale.kind} histogram of {scale.n} bins over "
                                     f"{scale.lo:g}-{scale.hi:g} {units}; the estimate lies "
                                     f"within quantile_error_bound of the exact quantile "
                                     f"(numpy.quantile, linear interpolation); NaN where the "
                                     f"quantile falls outside that range")}
        data_vars[f"{n}_count"] = (dims, stack["count"].astype(np.int32),
                                   {"units": "1",
                                    "long_name": f"number of finite samples of {label}"})
        texts = [("mean", "mean", "mean"), ("median", "median", "median"),
                 ("std", "sample standard deviation", "standard_deviation"),
                 ("iqr", "interquartile range (75th - 25th percentile)", None)]
        texts += [(quantile_name(q), f"{q:g} quantile", None) for q in quantiles]
        for stat, text, method in texts:
            attrs = {"units": units, "long_name": f"{text} of {label} per cell"}
            if method:
                attrs["cell_methods"] = f"{methods} {method}"
            if stat not in ("mean", "std"):
                attrs.update(bound)
                if stat == "iqr":
                    attrs["quantile_error_bound"] = 2 * scale.error_bound
                    if scale.kind == "log":
                        attrs["quantile_error_kind"] = "relative to the 75th percentile"
            if n in LOG_SPREAD:
                attrs["comment"] = (
                    f"{n} spans decades within a cell: the median is the meaningful statistic "
                    "(the mean and standard deviation are dominated by the largest values); "
                    "samples where only a bound is known (diffusion_flag 2 or 4) have no value "
                    "and are not counted")
            data_vars[f"{n}_{stat}"] = (dims, stack[stat], attrs)
    g = ref["global"]
    where = " and ".join(a.dim for a in axes)
    attrs = {
        "title": f"beltkit survey: loss-cone populations binned by {where} and time",
        "source": ", ".join(p.name for p, _ in infos),
        "source_sha256": json.dumps(checksums),
        "beltkit_version": __version__,
        "binning": binning if isinstance(binning, str) else " x ".join(binning),
        "field_model": g.get("field_model", "unknown"),
        "field_model_by_file": json.dumps({p.name: i["global"].get("field_model", "unknown")
                                           for p, i in infos}),
        "field_epoch": g.get("field_epoch", "unknown"),
        "footpoint_altitude_km": g.get("footpoint_altitude_km", np.nan),
        "time_window": "all samples" if time_window is None else str(time_window),
        "quantile_error_bound": json.dumps({n: spec["scales"][n].error_bound for n in names}),
        "quantile_note": ("medians, IQRs and quantiles come from fixed fine histograms "
                          "(beltkit.aggregate); each variable's quantile_error_bound attribute "
                          "gives the worst-case difference from the exact value"),
    }
    if any(n in LOG_SPREAD for n in names):
        for key in ("beltkit_loss_time", "beltkit_species", "beltkit_interval_sigma",
                    "beltkit_regime_boundary"):
            if key in g:
                attrs[key] = g[key]
    noted = [(Path(p).name, i["global"]["field_model_note"]) for p, i in infos
             if i["global"].get("field_model_note")]
    if noted:  # e.g. the centred dipole below 2,000 km: said once, with the files it concerns
        attrs["field_model_note"] = (
            f"{len(noted)} of {len(infos)} summaries (" + ", ".join(n for n, _ in noted)
            + ") hold samples below 2000 km altitude partitioned in the centred dipole, which "
            "has no quasi-trapped population there (see each summary's field_model_note)")
    return xr.Dataset(data_vars, coords=coords, attrs=attrs)
