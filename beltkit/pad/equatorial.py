r"""Map local pitch-angle distributions to the magnetic equator.

With the first adiabatic invariant conserved (and the energy constant in a
static magnetic field), :math:`\sin^2\alpha / B` is the same at every point
of a field line, so a particle seen at local pitch angle :math:`\alpha` where
the field is :math:`B_\mathrm{loc}` crosses the line's field minimum
:math:`B_\mathrm{min}` at

.. math:: \sin\alpha_{eq} = \sin\alpha\,\sqrt{B_\mathrm{min}/B_\mathrm{loc}},

moving the same way along B (both below or both above 90 deg). By Liouville's
theorem the directional flux at equal energy and first invariant is carried
unchanged along the line, :math:`j_{eq}(\alpha_{eq}) = j(\alpha)`.

On a caller's equatorial grid, each :math:`\alpha_{eq}` is traced back to
:math:`\sin\alpha = \sin\alpha_{eq}\sqrt{B_\mathrm{loc}/B_\mathrm{min}}`:

* if that exceeds 1 the particles mirror between the equator and the
  spacecraft, so the sample cannot see them (flag bit 1, NaN);
* otherwise the local distribution is read there, by linear interpolation
  between bin centres (``method="linear"``; within a bin but outside the
  span of centres the bin's own value is used) or as the value of the bin
  containing it (``method="bin"``); a local pitch angle in no bin is
  unsampled (flag bit 2, NaN).

Local pitch angles that cannot reach the equator (possible only where
:math:`B_\mathrm{loc} < B_\mathrm{min}`, e.g. a measured local field below the
model minimum) are flagged per bin in ``local_reach_flag``.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .conventions import FLUX_UNITS, ValueMask, check, flux_unit_factor
from .losscones import sample_loss_cones, time_coords

__all__ = ["to_equatorial"]


def _map_block(flux, err, ratio, *, centres, lo, hi, folded, alpha_eq, method, fmask, emask,
               dtype):
    """Map one time block: flux (n, E, P), ratio = B_loc / B_min (n,) -> (n, E, G) x2, flag."""
    x = fmask.apply(flux, dtype)
    s = emask.apply(err, dtype) if err is not None else None
    n, n_e, n_p = x.shape
    s_eq = np.sin(np.radians(alpha_eq))[None, :]  # (1, G)
    with np.errstate(invalid="ignore"):
        s_loc = s_eq * np.sqrt(ratio)[:, None]  # (n, G)
    unreachable = ~(s_loc <= 1.0)
    a_loc = np.degrees(np.arcsin(np.clip(s_loc, 0.0, 1.0)))
    a_loc = np.where(alpha_eq[None, :] > 90.0, 180.0 - a_loc, a_loc)
    if folded:
        a_loc = np.where(a_loc > 90.0, 180.0 - a_loc, a_loc)
    # bin containing a_loc (bins sorted and disjoint)
    k = np.clip(np.searchsorted(hi, a_loc, side="left"), 0, n_p - 1)
    inside = (a_loc >= lo[k] - 1e-9) & (a_loc <= hi[k] + 1e-9)
    if method == "bin" or n_p == 1:
        i0 = i1 = k
        w1 = np.zeros_like(a_loc)
    else:
        j = np.clip(np.searchsorted(centres, a_loc, side="right") - 1, 0, n_p - 2)
        c0, c1 = centres[j], centres[j + 1]
        within = (a_loc >= c0) & (a_loc <= c1)
        contiguous = np.abs(hi[j] - lo[j + 1]) < 1e-9  # no gap between the two bins
        use_lin = within & contiguous
        w1 = np.where(use_lin, (a_loc - c0) / (c1 - c0), 0.0)
        i0 = np.where(use_lin, j, k)
        i1 = np.where(use_lin, j + 1, k)
    idx0 = np.broadcast_to(i0[:, None, :], (n, n_e, i0.shape[1]))
    idx1 = np.broadcast_to(i1[:, None, :], (n, n_e, i1.shape[1]))
    w1b = w1[:, None, :].astype(dtype)
    v0 = np.take_along_axis(x, idx0, axis=2)
    v1 = np.take_along_axis(x, idx1, axis=2)
    out = (1 - w1b) * v0 + w1b * v1
    flag = np.where(unreachable, 1, np.where(~inside, 2, 0)).astype(np.int8)
    bad = (flag > 0)[:, None, :]
    out = np.where(bad, np.nan, out).astype(dtype, copy=False)
    if s is not None:
        e0 = np.take_along_axis(s, idx0, axis=2)
        e1 = np.take_along_axis(s, idx1, axis=2)
        err_out = np.sqrt(((1 - w1b) * e0) ** 2 + (w1b * e1) ** 2)
        err_out = np.where(bad, np.nan, err_out).astype(dtype, copy=False)
    else:
        err_out = np.full_like(out, np.nan)
    return out, err_out, flag


def to_equatorial(ds, model=None, alpha_eq_deg=None, *, altitude_km=100.0, method="linear",
                  allow_negative=False):
    r"""Map the local pitch-angle distribution to equatorial pitch angle.

    .. math::
        \sin\alpha_{eq} = \sin\alpha\sqrt{B_\mathrm{min}/B_\mathrm{loc}},
        \qquad j_{eq}(\alpha_{eq}) = j(\alpha)

    (first-invariant conservation and Liouville's theorem; see the module
    docstring for the treatment of unreachable and unsampled angles).

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset with pitch-angle bins (``docs/conventions.md``). Not modified;
        dask-backed data stay lazy.
    model : None, "dipole", "igrf" or FieldModel, optional
        Field model giving :math:`B_\mathrm{loc}` and :math:`B_\mathrm{min}`
        (None: centred dipole from ``L``, ``mlat``; ``b_local`` from the
        dataset is used when present).
    alpha_eq_deg : array_like, optional
        Equatorial pitch-angle grid (deg, 0-180); default 0.5 to 179.5 in
        1-degree steps.
    altitude_km : float, keyword-only
        Footpoint altitude for the loss cones carried along, in km above the
        sphere of radius R_E = 6371.2 km (:data:`beltkit.constants.R_E_KM`),
        not the ellipsoid.
    method : {"linear", "bin"}, keyword-only
        Linear interpolation between bin centres, or the containing bin's value.
    allow_negative : bool, keyword-only
        Accept negative flux values (mapped like any other).

    Returns
    -------
    xarray.Dataset
        ``flux_equatorial`` (time, energy, alpha_eq) in cm-2 s-1 sr-1 keV-1 and,
        when the dataset has ``flux_err`` or ``counts``, ``flux_equatorial_err``;
        ``equatorial_flag`` (time, alpha_eq; bit 1 not reachable at the sample,
        bit 2 not sampled), ``local_reach_flag`` (time, pitch_angle; 1 where the
        local pitch angle mirrors before the equator), the per-time loss cones,
        ``b_local``, ``b_min``, ``L``, ``mlat``, ``mlt``.

    Raises
    ------
    ConventionError
        If the dataset breaks the conventions (or is telescope data).
    ValueError
        For a bad grid or method.
    """
    from ..errors import ConventionError

    prep = check(ds, model=model, allow_negative=allow_negative)
    if prep.kind != "bins":
        raise ConventionError(["flux: to_equatorial needs pitch-angle bins (dimension "
                               "'pitch_angle'); telescope data have no distribution to map"],
                              ds.encoding.get("source"))
    if method not in ("linear", "bin"):
        raise ValueError(f"method must be 'linear' or 'bin', got {method!r}")
    if alpha_eq_deg is None:
        alpha_eq = np.arange(0.5, 180.0, 1.0)
    else:
        alpha_eq = np.atleast_1d(np.asarray(alpha_eq_deg, dtype=float))
        if alpha_eq.ndim != 1 or np.any(~np.isfinite(alpha_eq)) or np.any(alpha_eq < 0) or np.any(
                alpha_eq > 180):
            raise ValueError("alpha_eq_deg must be a 1-D grid of finite angles in 0-180 degree")
    lc = sample_loss_cones(ds, prep, model=model, altitude_km=altitude_km)
    ratio = (lc["b_min"] / lc["b_local"]).reset_coords(drop=True)
    edges = prep.edges
    centres = prep.centres
    flux = ds["flux"].transpose("time", "energy", "pitch_angle").reset_coords(drop=True)
    dtype = np.dtype(np.float32) if flux.dtype == np.float32 else np.dtype(np.float64)
    has_err = prep.error_source is not None
    emask = prep.err_mask
    if prep.error_source == "flux_err":
        err = ds["flux_err"]
    elif prep.error_source == "counts":  # Poisson, N = 0 counted as 1 (docs/conventions.md)
        counts = ds["counts"].astype(float)
        c2f = ds["counts_to_flux"] * flux_unit_factor(ds["counts_to_flux"].attrs["units"])
        err = np.sqrt(counts.clip(min=1)) * c2f
        emask = ValueMask()
    else:
        err = xr.zeros_like(ds["flux"])
        emask = ValueMask()
    err = err.transpose("time", "energy", "pitch_angle").reset_coords(drop=True)
    kwargs = dict(centres=centres, lo=edges[:, 0], hi=edges[:, 1], folded=prep.folded,
                  alpha_eq=alpha_eq, method=method, fmask=prep.flux_mask, emask=emask,
                  dtype=dtype)
    if flux.chunks is not None:
        flux = flux.chunk({"energy": -1, "pitch_angle": -1})
        err = err.chunk(flux.chunksizes)
        ratio = ratio.chunk({"time": flux.chunksizes["time"]})
    fl = flux.rename({"pitch_angle": "_p"})
    er = err.rename({"pitch_angle": "_p"})
    out, out_err, flag = xr.apply_ufunc(
        _map_block, fl, er, 1.0 / ratio,
        kwargs=kwargs,
        input_core_dims=[["energy", "_p"], ["energy", "_p"], []],
        output_core_dims=[["energy", "alpha_eq"], ["energy", "alpha_eq"], ["alpha_eq"]],
        dask="parallelized", output_dtypes=[dtype, dtype, np.int8],
        dask_gufunc_kwargs={"output_sizes": {"alpha_eq": alpha_eq.size}},
    )
    # local pitch angles that cannot reach the equator: sin^2(alpha) * B_min / B_loc > 1
    s2 = np.sin(np.radians(np.where(centres > 90, 180 - centres, centres))) ** 2
    reach = xr.apply_ufunc(
        lambda r: (s2[None, :] * np.asarray(r)[:, None] > 1.0).astype(np.int8), ratio,
        output_core_dims=[["pitch_angle"]], dask="parallelized", output_dtypes=[np.int8],
        dask_gufunc_kwargs={"output_sizes": {"pitch_angle": centres.size}},
    )
    variables = {
        "flux_equatorial": xr.Variable(
            ("time", "energy", "alpha_eq"), out.transpose("time", "energy", "alpha_eq").data,
            {"units": FLUX_UNITS, "long_name": "differential directional flux at the magnetic "
             "equator (Liouville mapping)"}),
        "equatorial_flag": xr.Variable(
            ("time", "alpha_eq"), flag.transpose("time", "alpha_eq").data,
            {"long_name": "equatorial mapping flags",
             "flag_masks": np.array([1, 2], dtype=np.int8),
             "flag_meanings": "mirrors_between_equator_and_sample not_sampled"}),
        "local_reach_flag": xr.Variable(
            ("time", "pitch_angle"), reach.transpose("time", "pitch_angle").data,
            {"long_name": "local pitch angle cannot reach the magnetic equator",
             "flag_values": np.array([0, 1], dtype=np.int8),
             "flag_meanings": "reaches_equator mirrors_before_equator"}),
    }
    if has_err:
        variables["flux_equatorial"].attrs["ancillary_variables"] = "flux_equatorial_err"
        variables["flux_equatorial_err"] = xr.Variable(
            ("time", "energy", "alpha_eq"),
            out_err.transpose("time", "energy", "alpha_eq").data,
            {"units": FLUX_UNITS, "long_name": "uncertainty (1 sigma) of flux equatorial"})
    for name in lc.data_vars:
        variables[name] = lc[name].variable
    bdim = ds["energy_bnds"].dims[1]
    variables["energy_bnds"] = xr.Variable(("energy", bdim), prep.energy_bnds_kev,
                                          encoding={"_FillValue": None})
    res = xr.Dataset(variables, coords=time_coords(ds))
    res = res.assign_coords(
        energy=xr.Variable("energy", prep.energy_kev, {"units": "keV", "long_name":
                                                        "kinetic energy", "bounds":
                                                        "energy_bnds"}),
        alpha_eq=xr.Variable("alpha_eq", alpha_eq, {"units": "degree",
                                                    "long_name": "equatorial pitch angle"}),
        pitch_angle=xr.Variable("pitch_angle", centres, {"units": "degree",
                                                         "long_name": "local pitch angle"}),
    )
    res.attrs = {"title": "beltkit equatorial pitch-angle distribution",
                 "beltkit_field_model": str(getattr(model, "name", model or "dipole")),
                 "beltkit_mapping_method": method}
    return res
