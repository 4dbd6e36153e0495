r"""Fit :math:`j = A \sin^n\alpha` to the trapped part of each pitch-angle distribution.

For every (time, energy) the bins lying wholly inside the trapped range
:math:`[\alpha_D, 180 - \alpha_D]` with positive, finite flux are used, at
their centres :math:`\alpha_i`.

* ``method="linear"`` (default): weighted least squares of
  :math:`y_i = \ln j_i = \ln A + n \ln\sin\alpha_i`, with weights
  :math:`w_i = (j_i/\sigma_i)^2` (:math:`\sigma_{\ln j} = \sigma_j / j`), solved in
  closed form for all spectra at once from the weighted sums
  :math:`S = \sum w`, :math:`S_x`, :math:`S_{xx}`, :math:`S_y`, :math:`S_{xy}`:
  :math:`n = (S S_{xy} - S_x S_y)/\Delta`,
  :math:`\ln A = (S_{xx} S_y - S_x S_{xy})/\Delta`, :math:`\Delta = S S_{xx} - S_x^2`,
  :math:`\sigma_n^2 = S/\Delta`, :math:`\sigma_{\ln A}^2 = S_{xx}/\Delta`.
* ``method="nonlinear"``: Levenberg-Marquardt on
  :math:`\chi^2 = \sum ((j_i - A\sin^n\alpha_i)/\sigma_i)^2`, batched over all
  spectra (2x2 normal equations per spectrum, no Python loop over spectra),
  started from the linear solution; errors from the inverse curvature matrix.

Goodness of fit: :math:`\chi^2/\nu` in flux space,
:math:`\nu = N - 2`. Without uncertainties in the dataset the weights are 1
(in log space for the linear fit, in flux space for the nonlinear one) and
the parameter errors are scaled by :math:`\sqrt{\chi^2/\nu}`.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .conventions import FLUX_UNITS, ValueMask, check, flux_unit_factor
from .losscones import sample_loss_cones, time_coords

__all__ = ["fit_sine_power"]


def _fit_block(flux, err, dlc, *, lo, hi, x_ln_sin, fmask, emask, has_err, method, max_iter):
    """Fit one block: flux (n, E, P), err (n, E, P), dlc (n,) -> (n, E, 6)."""
    j = fmask.apply(flux, np.float64)
    s = emask.apply(err, np.float64) if has_err else np.ones_like(j)
    use_bin = (lo[None, :] >= dlc[:, None] - 1e-9) & (hi[None, :] <= 180.0 - dlc[:, None] + 1e-9)
    ok_any = use_bin[:, None, :] & np.isfinite(j) & np.isfinite(x_ln_sin)[None, None, :]
    if has_err:
        ok_any &= np.isfinite(s) & (s > 0)
    ok = ok_any & (j > 0)  # the log fit needs positive flux
    x = np.where(np.isfinite(x_ln_sin), x_ln_sin, 0.0)[None, None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        y = np.where(ok, np.log(np.where(ok, j, 1.0)), 0.0)
        w = np.where(ok, (j / s) ** 2 if has_err else 1.0, 0.0)
        S = w.sum(-1)
        Sx = (w * x).sum(-1)
        Sxx = (w * x * x).sum(-1)
        Sy = (w * y).sum(-1)
        Sxy = (w * x * y).sum(-1)
        det = S * Sxx - Sx * Sx
        npts = ok.sum(-1)
        good = (npts >= 2) & (det > 1e-12 * np.maximum(S * Sxx, 1e-300))
        n_idx = np.where(good, (S * Sxy - Sx * Sy) / det, np.nan)
        ln_a = np.where(good, (Sxx * Sy - Sx * Sxy) / det, np.nan)
        var_n = S / det
        var_lna = Sxx / det
        if method == "nonlinear":
            ok = ok_any  # flux space: zero and negative values take part
            npts = ok.sum(-1)
            good &= npts >= 2
            sig = np.where(ok, s, 1.0)
            lam = np.full(n_idx.shape, 1e-3)
            p0 = np.where(good, ln_a, 0.0)
            p1 = np.where(good, n_idx, 0.0)

            def chi2_of(a, b):
                model = np.exp(a[..., None] + b[..., None] * x)
                r = np.where(ok, (j - model) / sig, 0.0)
                return (r * r).sum(-1), model, r

            chi, model, r = chi2_of(p0, p1)
            for _ in range(max_iter):
                ja = np.where(ok, -model / sig, 0.0)  # d r / d ln A
                jb = ja * x  # d r / d n
                h00 = (ja * ja).sum(-1)
                h01 = (ja * jb).sum(-1)
                h11 = (jb * jb).sum(-1)
                g0 = (ja * r).sum(-1)
                g1 = (jb * r).sum(-1)
                a00 = h00 * (1 + lam)
                a11 = h11 * (1 + lam)
                dd = a00 * a11 - h01 * h01
                d0 = -(a11 * g0 - h01 * g1) / dd
                d1 = -(a00 * g1 - h01 * g0) / dd
                q0 = p0 + np.where(good & np.isfinite(d0), d0, 0.0)
                q1 = p1 + np.where(good & np.isfinite(d1), d1, 0.0)
                chi_new, model_new, r_new = chi2_of(q0, q1)
                better = chi_new < chi
                p0 = np.where(better, q0, p0)
                p1 = np.where(better, q1, p1)
                chi = np.where(better, chi_new, chi)
                model = np.where(better[..., None], model_new, model)
                r = np.where(better[..., None], r_new, r)
                lam = np.where(better, lam * 0.3, lam * 10.0)
            ja = np.where(ok, -model / sig, 0.0)
            jb = ja * x
            h00 = (ja * ja).sum(-1)
            h01 = (ja * jb).sum(-1)
            h11 = (jb * jb).sum(-1)
            dd = h00 * h11 - h01 * h01
            var_lna = h11 / dd
            var_n = h00 / dd
            ln_a = np.where(good, p0, np.nan)
            n_idx = np.where(good, p1, np.nan)
            chi2 = chi
        else:
            model = np.exp(ln_a[..., None] + n_idx[..., None] * x)
            if has_err:
                chi2 = np.where(ok, ((j - model) / s) ** 2, 0.0).sum(-1)
            else:  # log-space residuals: the quantity minimised with unit weights
                chi2 = np.where(ok, (y - np.log(model)) ** 2, 0.0).sum(-1)
        dof = npts - 2
        red = np.where(dof > 0, chi2 / np.maximum(dof, 1), np.nan)
        scale = np.ones_like(red) if has_err else np.where(dof > 0, red, np.nan)
        a = np.exp(ln_a)
        a_err = a * np.sqrt(np.abs(var_lna) * scale)
        n_err = np.sqrt(np.abs(var_n) * scale)
    res = np.stack([a, n_idx, np.where(good, a_err, np.nan), np.where(good, n_err, np.nan),
                    np.where(good, red, np.nan), dof.astype(float)], axis=-1)
    return res


def fit_sine_power(ds, model=None, *, altitude_km=100.0, method="linear", max_iter=30,
                   allow_negative=False):
    r"""Fit :math:`j = A\sin^n\alpha` per (time, energy) on the trapped bins.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset with pitch-angle bins (not modified; dask data stay lazy).
    model : None, "dipole", "igrf" or FieldModel, optional
        Field model for the drift loss cone that bounds the trapped range.
    altitude_km : float, keyword-only
        Footpoint altitude, in km above the sphere of radius R_E = 6371.2 km
        (:data:`beltkit.constants.R_E_KM`), not the ellipsoid.
    method : {"linear", "nonlinear"}, keyword-only
        Linearised weighted log fit (closed form), or batched
        Levenberg-Marquardt in flux space started from it.
    max_iter : int, keyword-only
        Iterations of the nonlinear fit.
    allow_negative : bool, keyword-only
        Accept negative flux values (background-subtracted data). The linear
        fit skips non-positive values; the nonlinear fit uses them.

    Returns
    -------
    xarray.Dataset
        Per (time, energy): ``sine_amplitude`` (A, cm-2 s-1 sr-1 keV-1),
        ``sine_index`` (n), their ``_err``, ``sine_chi2_reduced``
        (:math:`\chi^2/\nu`) and ``sine_dof`` (:math:`\nu`); plus the per-time
        loss cones.

    Raises
    ------
    ConventionError
        If the dataset breaks the conventions or holds telescope data.
    """
    from ..errors import ConventionError

    if method not in ("linear", "nonlinear"):
        raise ValueError(f"method must be 'linear' or 'nonlinear', got {method!r}")
    prep = check(ds, model=model, allow_negative=allow_negative)
    if prep.kind != "bins":
        raise ConventionError(["flux: fit_sine_power needs pitch-angle bins (dimension "
                               "'pitch_angle'), not telescope looks"], ds.encoding.get("source"))
    lc = sample_loss_cones(ds, prep, model=model, altitude_km=altitude_km)
    flux = ds["flux"].transpose("time", "energy", "pitch_angle").reset_coords(drop=True)
    has_err = prep.error_source is not None
    emask = prep.err_mask
    if prep.error_source == "flux_err":
        err = ds["flux_err"]
    elif prep.error_source == "counts":
        c2f = ds["counts_to_flux"] * flux_unit_factor(ds["counts_to_flux"].attrs["units"])
        err = np.sqrt(ds["counts"].astype(float).clip(min=1)) * c2f
        emask = ValueMask()
    else:
        err = xr.zeros_like(ds["flux"])
        emask = ValueMask()
    err = err.transpose("time", "energy", "pitch_angle").reset_coords(drop=True)
    dlc = lc["dlc_local"].reset_coords(drop=True)
    if flux.chunks is not None:
        flux = flux.chunk({"energy": -1, "pitch_angle": -1})
        err = err.chunk(flux.chunksizes)
        dlc = dlc.chunk({"time": flux.chunksizes["time"]})
    centres = prep.centres
    with np.errstate(divide="ignore"):
        x_ln_sin = np.log(np.sin(np.radians(centres)))
    res = xr.apply_ufunc(
        _fit_block, flux.rename({"pitch_angle": "_p"}), err.rename({"pitch_angle": "_p"}), dlc,
        kwargs=dict(lo=prep.edges[:, 0], hi=prep.edges[:, 1], x_ln_sin=x_ln_sin,
                    fmask=prep.flux_mask, emask=emask, has_err=has_err, method=method,
                    max_iter=int(max_iter)),
        input_core_dims=[["energy", "_p"], ["energy", "_p"], []],
        output_core_dims=[["energy", "_q"]],
        dask="parallelized", output_dtypes=[float],
        dask_gufunc_kwargs={"output_sizes": {"_q": 6}},
    ).transpose("time", "energy", "_q")
    meta = [
        ("sine_amplitude", FLUX_UNITS, "amplitude A of the fit j = A sin^n(alpha)"),
        ("sine_index", "1", "index n of the fit j = A sin^n(alpha)"),
        ("sine_amplitude_err", FLUX_UNITS, "uncertainty (1 sigma) of sine amplitude"),
        ("sine_index_err", "1", "uncertainty (1 sigma) of sine index"),
        ("sine_chi2_reduced", "1", "chi-square per degree of freedom of the sine-power fit"),
        ("sine_dof", "1", "degrees of freedom of the sine-power fit"),
    ]
    variables = {}
    for k, (name, units, ln) in enumerate(meta):
        attrs = {"units": units, "long_name": ln}
        if name in ("sine_amplitude", "sine_index"):
            attrs["ancillary_variables"] = f"{name}_err"
        variables[name] = xr.Variable(("time", "energy"), res.isel(_q=k).data, attrs)
    for name in ("blc_local", "dlc_local", "L", "mlat", "mlt"):
        if name in lc:
            variables[name] = lc[name].variable
    bdim = ds["energy_bnds"].dims[1]
    variables["energy_bnds"] = xr.Variable(("energy", bdim), prep.energy_bnds_kev,
                                          encoding={"_FillValue": None})
    out = xr.Dataset(variables, coords=time_coords(ds)).assign_coords(
        energy=xr.Variable("energy", prep.energy_kev, {"units": "keV", "long_name":
                                                        "kinetic energy", "bounds":
                                                        "energy_bnds"}))
    out.attrs = {"title": "beltkit sine-power pitch-angle fits", "beltkit_fit_method": method}
    return out
