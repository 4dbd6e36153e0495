"""Small flux datasets that follow beltkit's data conventions, for tests.

Shared helper: any test module may import it (``from tests._flux_factory
import flux_dataset`` or, with ``tests`` on ``sys.path``, ``from _flux_factory
import ...``). The data are invented test input only (a sin^n pitch-angle shape
on a falling power-law spectrum, Poisson counts); no test uses them as a
reference value.

Layout (see docs/conventions.md)::

    dims      time, energy, pitch_angle, nv (=2, bounds)
    time      datetime64[ns] UTC, 1 s cadence by default
    energy    keV, bounds energy_bnds (energy, nv)
    pitch_angle  deg, bin centres, bounds pitch_angle_bnds (pitch_angle, nv), 0-180
    flux      (time, energy, pitch_angle) cm-2 s-1 sr-1 keV-1, float32
    flux_err  same units, from the Poisson counts
    counts    (time, energy, pitch_angle) counts; counts_to_flux (energy,) flux per count
    L         (time,) 1        mlat (time,) degrees_north-like deg     mlt (time,) h
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from beltkit.units import FLUX_UNITS  # the one flux unit string

__all__ = ["flux_dataset", "make_ds", "make_telescope_ds", "summary_like_dataset",
           "write_flux_cdf", "write_flux_file"]


def flux_dataset(n_time=120, n_energy=4, n_pitch=12, *, start="2026-03-01T00:00:00",
                 cadence_s=1.0, seed=1, l_range=(3.0, 6.0), mlat_amp_deg=10.0,
                 sine_power=2.0, dtype="float32") -> xr.Dataset:
    """Return a convention-following equatorial-spectrometer flux dataset.

    Parameters
    ----------
    n_time, n_energy, n_pitch : int
        Sizes of the three dimensions.
    start : str
        ISO time of the first sample (UTC).
    cadence_s : float
        Sample spacing in seconds.
    seed : int
        Seed of the Poisson counts.
    l_range : (float, float)
        L sweeps linearly between these values.
    mlat_amp_deg : float
        Magnetic latitude oscillates with this amplitude.
    sine_power : float
        Exponent of the sin^n pitch-angle shape.
    dtype : str
        Float type of flux and flux_err.
    """
    rng = np.random.default_rng(seed)
    t0 = np.datetime64(start, "ns")
    time = t0 + (np.arange(n_time) * cadence_s * 1e9).astype("timedelta64[ns]")
    e_edges = np.geomspace(50.0, 3000.0, n_energy + 1)
    energy = np.sqrt(e_edges[:-1] * e_edges[1:])
    a_edges = np.linspace(0.0, 180.0, n_pitch + 1)
    alpha = 0.5 * (a_edges[:-1] + a_edges[1:])
    frac = np.linspace(0.0, 1.0, n_time)
    L = l_range[0] + (l_range[1] - l_range[0]) * frac
    mlat = mlat_amp_deg * np.sin(2 * np.pi * frac)
    mlt = (24.0 * frac * 1.5) % 24.0
    shape = np.sin(np.radians(alpha)) ** sine_power
    spectrum = 1e6 * (energy / 100.0) ** -2.5
    mean_flux = spectrum[None, :, None] * shape[None, None, :] * (1.0 + 0.2 * frac)[:, None, None]
    geometric = 1e-3  # cm2 sr keV s per count conversion of the invented instrument
    counts = rng.poisson(mean_flux * geometric * (e_edges[1:] - e_edges[:-1])[None, :, None])
    factor = 1.0 / (geometric * (e_edges[1:] - e_edges[:-1]))
    flux = counts * factor[None, :, None]
    flux_err = np.sqrt(np.maximum(counts, 1)) * factor[None, :, None]
    ds = xr.Dataset(
        {
            "flux": (("time", "energy", "pitch_angle"), flux.astype(dtype),
                     {"units": FLUX_UNITS, "long_name": "differential directional flux",
                      "ancillary_variables": "flux_err"}),
            "flux_err": (("time", "energy", "pitch_angle"), flux_err.astype(dtype),
                         {"units": FLUX_UNITS, "long_name": "flux uncertainty (1 sigma)"}),
            "counts": (("time", "energy", "pitch_angle"), counts.astype("int32"),
                       {"units": "1", "long_name": "detector counts per sample"}),
            "counts_to_flux": ("energy", factor,
                               {"units": FLUX_UNITS, "long_name": "flux per count"}),
            "energy_bnds": (("energy", "nv"), np.stack([e_edges[:-1], e_edges[1:]], -1),
                            {"units": "keV"}),
            "pitch_angle_bnds": (("pitch_angle", "nv"),
                                 np.stack([a_edges[:-1], a_edges[1:]], -1), {"units": "degree"}),
            "L": ("time", L, {"units": "1", "long_name": "dipole L-shell"}),
            "mlat": ("time", mlat, {"units": "degree", "long_name": "magnetic latitude"}),
            "mlt": ("time", mlt, {"units": "hour", "long_name": "magnetic local time"}),
        },
        coords={
            "time": ("time", time, {"long_name": "time (UTC)", "standard_name": "time"}),
            "energy": ("energy", energy, {"units": "keV", "long_name": "kinetic energy",
                                          "bounds": "energy_bnds"}),
            "pitch_angle": ("pitch_angle", alpha, {"units": "degree",
                                                   "long_name": "local pitch angle",
                                                   "bounds": "pitch_angle_bnds"}),
        },
        attrs={"title": "beltkit test flux (invented data)"},
    )
    return ds


def write_flux_file(path, ds=None, **kwargs) -> Path:
    """Write `ds` (default: :func:`flux_dataset` with `kwargs`) as netCDF-4; return the path."""
    path = Path(path)
    if ds is None:
        ds = flux_dataset(**kwargs)
    encoding = {"time": {"units": "seconds since 2000-01-01 00:00:00", "dtype": "float64"}}
    ds.to_netcdf(path, engine="netcdf4", encoding=encoding)
    return path


def write_flux_cdf(path, ds=None, **kwargs) -> Path:
    """Write `ds` as a NASA CDF with cdflib's writer and ISTP-style attributes.

    Time is stored as CDF_TIME_TT2000; every record-varying variable gets
    ``DEPEND_0 = "time"`` and its other axes ``DEPEND_1``, ``DEPEND_2``;
    ``units`` becomes ``UNITS``.
    """
    import cdflib
    from cdflib.cdfwrite import CDF

    path = Path(path)
    if ds is None:
        ds = flux_dataset(**kwargs)
    if path.exists():
        path.unlink()
    types = {np.dtype("float32"): 21, np.dtype("float64"): 22, np.dtype("int32"): 4,
             np.dtype("int64"): 8}
    cdf = CDF(str(path), cdf_spec={"Compressed": False})
    cdf.write_globalattrs({"title": {0: ds.attrs.get("title", "")}})
    tt = cdflib.cdfepoch.timestamp_to_tt2000(
        ds["time"].values.astype("datetime64[ns]").astype("int64") / 1e9)
    cdf.write_var(
        {"Variable": "time", "Data_Type": 33, "Num_Elements": 1, "Rec_Vary": True,
         "Dim_Sizes": []},
        var_attrs={"CATDESC": "time (UTC)"},
        var_data=np.asarray(tt, dtype="int64"),
    )
    for name, var in ds.variables.items():
        if name == "time":
            continue
        data = np.asarray(var.values)
        attrs = {}
        for key, value in var.attrs.items():
            attrs["UNITS" if key == "units" else key] = value
        rec = "time" in var.dims
        other = [d for d in var.dims if d != "time"]
        for i, d in enumerate(other, start=1):
            if d != "nv" and not (d == name and var.ndim == 1):
                attrs[f"DEPEND_{i}"] = d
        if rec:
            attrs["DEPEND_0"] = "time"
        dims = [int(ds.sizes[d]) for d in other]
        if var.ndim == 1 and var.dims == (name,):
            dims = [int(var.size)]
        spec = {"Variable": name, "Data_Type": types[data.dtype], "Num_Elements": 1,
                "Rec_Vary": rec, "Dim_Sizes": dims}
        cdf.write_var(spec, var_attrs=attrs, var_data=data)
    cdf.close()
    return path


def summary_like_dataset(n_time=200, n_energy=3, *, start="2026-03-01T00:00:00",
                         cadence_s=60.0, seed=5, field_model="dipole",
                         altitude_km=100.0) -> xr.Dataset:
    """Return a dataset shaped like a summary file (for survey tests without partition).

    Random fractions (summing to one), integrated fluxes, and L, mlat, mlt per
    time; global attributes as :func:`beltkit.batch.summarize` records them.
    """
    rng = np.random.default_rng(seed)
    t0 = np.datetime64(start, "ns")
    time = t0 + (np.arange(n_time) * cadence_s * 1e9).astype("timedelta64[ns]")
    e_edges = np.geomspace(50.0, 3000.0, n_energy + 1)
    energy = np.sqrt(e_edges[:-1] * e_edges[1:])
    raw = rng.gamma(2.0, size=(3, n_time, n_energy))
    frac = raw / raw.sum(axis=0)
    omni = 10 ** rng.uniform(2, 6, size=(n_time, n_energy))
    te = ("time", "energy")
    data = {
        "fraction_precipitating": (te, frac[0], {"units": "1"}),
        "fraction_quasi_trapped": (te, frac[1], {"units": "1"}),
        "fraction_trapped": (te, frac[2], {"units": "1"}),
        "omni_flux": (te, omni, {"units": "cm-2 s-1 keV-1"}),
        "flux_precipitating": (te, omni * frac[0], {"units": "cm-2 s-1 keV-1"}),
        "flux_quasi_trapped": (te, omni * frac[1], {"units": "cm-2 s-1 keV-1"}),
        "flux_trapped": (te, omni * frac[2], {"units": "cm-2 s-1 keV-1"}),
        "L": ("time", rng.uniform(1.5, 7.5, n_time), {"units": "1"}),
        "mlat": ("time", rng.uniform(-20, 20, n_time), {"units": "degree"}),
        "mlt": ("time", rng.uniform(0, 24, n_time), {"units": "h"}),
        "energy_bnds": (("energy", "nv"), np.stack([e_edges[:-1], e_edges[1:]], -1),
                        {"units": "keV"}),
    }
    data["fraction_trapped"][1][0, 0] = np.nan  # one missing value
    return xr.Dataset(
        data,
        coords={"time": ("time", time, {"standard_name": "time"}),
                "energy": ("energy", energy, {"units": "keV", "bounds": "energy_bnds"})},
        attrs={"field_model": field_model, "field_epoch": "2020",
               "footpoint_altitude_km": altitude_km},
    )


def _times(n_t, start, cadence_s):
    """Return `n_t` datetime64[ns] times from ISO `start` every `cadence_s` seconds."""
    step = (np.arange(n_t) * cadence_s * 1e9).astype("timedelta64[ns]")
    return np.datetime64(start, "ns") + step


def make_ds(flux, edges_deg, *, L=4.0, mlat=0.0, mlt=None, b_local=None, flux_err=None,
            energy_kev=None, energy_edges_kev=None, counts=None, counts_to_flux=None,
            start="2026-06-01T00:00:00", cadence_s=1.0, dtype=float, folded=False):
    """Return a bins dataset: flux (time, energy, pitch_angle), edges (P+1,) or (P, 2) deg.

    Energies are `energy_kev` with bounds 0.9 and 1.1 times each (default 100,
    200, ... keV), or the geometric centres of `energy_edges_kev` (E+1,) with
    those edges as bounds. `counts` (time, energy, pitch_angle) and
    `counts_to_flux` (scalar or (energy,)) add the count variables; times run
    from `start` every `cadence_s` seconds.
    """
    flux = np.asarray(flux, dtype=dtype)
    n_t, n_e, n_p = flux.shape
    edges = np.asarray(edges_deg, dtype=float)
    bnds = np.stack([edges[:-1], edges[1:]], axis=1) if edges.ndim == 1 else edges
    if energy_edges_kev is not None:
        e_edges = np.asarray(energy_edges_kev, dtype=float)
        energy_kev = np.sqrt(e_edges[:-1] * e_edges[1:])
        ebnds = np.stack([e_edges[:-1], e_edges[1:]], axis=1)
    else:
        if energy_kev is None:
            energy_kev = 100.0 * (1 + np.arange(n_e))
        energy_kev = np.asarray(energy_kev, dtype=float)
        ebnds = np.stack([energy_kev * 0.9, energy_kev * 1.1], axis=1)
    time = _times(n_t, start, cadence_s)
    L = np.broadcast_to(np.asarray(L, dtype=float), (n_t,)).copy()
    mlat = np.broadcast_to(np.asarray(mlat, dtype=float), (n_t,)).copy()
    pa_attrs = {"units": "degree", "long_name": "local pitch angle", "bounds": "pitch_angle_bnds"}
    if folded:
        pa_attrs["folded"] = "true"
    data = {
        "flux": (("time", "energy", "pitch_angle"), flux, {"units": FLUX_UNITS}),
        "pitch_angle_bnds": (("pitch_angle", "nv"), bnds),
        "energy_bnds": (("energy", "nv"), ebnds),
        "L": ("time", L, {"units": "1"}),
        "mlat": ("time", mlat, {"units": "degree"}),
    }
    if mlt is not None:
        data["mlt"] = ("time", np.broadcast_to(np.asarray(mlt, float), (n_t,)).copy(),
                       {"units": "hour"})
    if b_local is not None:
        data["b_local"] = ("time", np.broadcast_to(np.asarray(b_local, float), (n_t,)).copy(),
                           {"units": "nT"})
    if flux_err is not None:
        data["flux_err"] = (("time", "energy", "pitch_angle"), np.asarray(flux_err, dtype=dtype),
                            {"units": FLUX_UNITS})
    if counts is not None:
        data["counts"] = (("time", "energy", "pitch_angle"), np.asarray(counts), {"units": "1"})
    if counts_to_flux is not None:
        factor = np.asarray(counts_to_flux, dtype=float)
        data["counts_to_flux"] = (("energy",) if factor.ndim else (), factor,
                                  {"units": FLUX_UNITS})
    return xr.Dataset(
        data,
        coords={"time": time,
                "energy": ("energy", energy_kev, {"units": "keV", "bounds": "energy_bnds"}),
                "pitch_angle": ("pitch_angle", bnds.mean(axis=1), pa_attrs)},
    )


def make_telescope_ds(flux, look_deg, half_deg, *, L=4.0, mlat=0.0, flux_err=None,
                      energy_kev=None, start="2026-06-01T00:00:00"):
    """Return a telescope dataset: flux (time, energy, look), look pitch angles (time, look).

    Energies are `energy_kev` (default 100, 200, ... keV) with bounds 0.9 and
    1.1 times each; times run from `start` every second.
    """
    flux = np.asarray(flux, dtype=float)
    n_t, n_e, n_k = flux.shape
    if energy_kev is None:
        energy_kev = 100.0 * (1 + np.arange(n_e))
    energy_kev = np.asarray(energy_kev, dtype=float)
    time = _times(n_t, start, 1.0)
    extra = {}
    if flux_err is not None:
        extra["flux_err"] = (("time", "energy", "look"), np.asarray(flux_err, dtype=float),
                             {"units": FLUX_UNITS})
    return xr.Dataset(
        {
            "flux": (("time", "energy", "look"), flux, {"units": FLUX_UNITS}),
            **extra,
            "look_pitch_angle": (("time", "look"),
                                 np.broadcast_to(np.asarray(look_deg, float), (n_t, n_k)).copy(),
                                 {"units": "degree"}),
            "look_half_angle": ("look", np.asarray(half_deg, float), {"units": "degree"}),
            "energy_bnds": (("energy", "nv"), np.stack([energy_kev * 0.9, energy_kev * 1.1], 1)),
            "L": ("time", np.broadcast_to(np.asarray(L, float), (n_t,)).copy(), {"units": "1"}),
            "mlat": ("time", np.broadcast_to(np.asarray(mlat, float), (n_t,)).copy(),
                     {"units": "degree"}),
        },
        coords={"time": time, "energy": ("energy", energy_kev, {"units": "keV"})},
    )
