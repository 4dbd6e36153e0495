"""Builders of small convention-following datasets for the pad tests (and their own checks).

The datasets are invented test input; every expected value in the pad tests
comes from an outside reference named beside the check.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from beltkit.pad import validate

FLUX_UNITS = "cm-2 s-1 sr-1 keV-1"


def make_ds(flux, edges_deg, *, L=4.0, mlat=0.0, mlt=None, b_local=None, flux_err=None,
            energy_kev=None, dtype=float, folded=False):
    """Return a bins dataset: flux (time, energy, pitch_angle), edges (P+1,) or (P, 2) deg."""
    flux = np.asarray(flux, dtype=dtype)
    n_t, n_e, n_p = flux.shape
    edges = np.asarray(edges_deg, dtype=float)
    bnds = np.stack([edges[:-1], edges[1:]], axis=1) if edges.ndim == 1 else edges
    if energy_kev is None:
        energy_kev = 100.0 * (1 + np.arange(n_e))
    energy_kev = np.asarray(energy_kev, dtype=float)
    ebnds = np.stack([energy_kev * 0.9, energy_kev * 1.1], axis=1)
    time = np.datetime64("2026-06-01T00:00:00", "ns") + np.arange(n_t) * np.timedelta64(1, "s")
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
    return xr.Dataset(
        data,
        coords={"time": time,
                "energy": ("energy", energy_kev, {"units": "keV", "bounds": "energy_bnds"}),
                "pitch_angle": ("pitch_angle", bnds.mean(axis=1), pa_attrs)},
    )


def make_telescope_ds(flux, look_deg, half_deg, *, L=4.0, mlat=0.0):
    """Return a telescope dataset: flux (time, energy, look), look pitch angles (time, look)."""
    flux = np.asarray(flux, dtype=float)
    n_t, n_e, n_k = flux.shape
    energy_kev = 100.0 * (1 + np.arange(n_e))
    time = np.datetime64("2026-06-01T00:00:00", "ns") + np.arange(n_t) * np.timedelta64(1, "s")
    return xr.Dataset(
        {
            "flux": (("time", "energy", "look"), flux, {"units": FLUX_UNITS}),
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


def test_builders_follow_the_conventions():
    ds = make_ds(np.ones((2, 3, 6)), np.linspace(0, 180, 7))
    assert validate(ds) == []
    tel = make_telescope_ds(np.ones((2, 1, 2)), [0.0, 90.0], [20.0, 20.0])
    assert validate(tel) == []
