r"""Split pitch-angle flux into precipitating, quasi-trapped and trapped populations.

Populations in local pitch angle :math:`\alpha \in [0, 180]` deg, from the
per-sample bounce and drift loss cones :math:`\alpha_B \le \alpha_D`
(:mod:`beltkit.pad.losscones`; the definitions are common practice):

* precipitating: :math:`[0, \alpha_B] \cup [180 - \alpha_B, 180]`
  (lost within one bounce, whichever way the particle moves);
* quasi-trapped: :math:`[\alpha_B, \alpha_D] \cup [180 - \alpha_D, 180 - \alpha_B]`
  (lost within one drift);
* trapped: :math:`[\alpha_D, 180 - \alpha_D]`.

Gyrotropy is assumed: a pitch-angle bin :math:`[a_1, a_2]` is the zone of
solid angle :math:`\Omega_i = 2\pi(\cos a_1 - \cos a_2)` and holds the bin's
flux :math:`j_i` uniformly. Its solid angle inside a population range
:math:`[r_1, r_2]` is exact,
:math:`\Omega_{iP} = 2\pi\max(0, \cos\max(a_1, r_1) - \cos\min(a_2, r_2))`,
so a loss-cone edge inside a bin splits the bin instead of rounding it. The
population's integrated flux and measured solid angle are

.. math::
    F_P = \sum_i j_i \Omega_{iP}, \qquad M_P = \sum_{i\,\mathrm{sampled}} \Omega_{iP},

its coverage :math:`M_P / \Omega_P` (:math:`\Omega_P` the population's full
solid angle), and its fraction :math:`f_P = F_P / (F_{prec} + F_{qt} + F_{tr})`.
With independent bin errors :math:`\sigma_i`

.. math::
    \sigma_{F_P}^2 = \sum_i \sigma_i^2 \Omega_{iP}^2, \qquad
    \sigma_{f_P}^2 = \sum_i \sigma_i^2
    \left(\frac{\Omega_{iP} - f_P \Omega_i}{F_{tot}}\right)^2,

the second from :math:`\partial f_P/\partial j_i`, which keeps the correlation
of numerator and denominator.

Telescopes (dimension ``look``): under gyrotropy look :math:`k` with pitch
angle :math:`\theta_k` and half-angle :math:`\delta_k` stands for the band
:math:`[\max(0, \theta_k - \delta_k), \min(180, \theta_k + \delta_k)]` (solid
angle :math:`\Omega_k`) that it sweeps over a gyration, with its flux uniform
over the band exactly as a bin. Overlapping bands are combined without
counting any pitch angle twice: the union of the bands is cut into intervals
:math:`m`, each taking its flux from the looks that cover it weighted by their
band solid angles, :math:`c_{mk} = \Omega_k / \sum_{k' \ni m}\Omega_{k'}`
(:func:`beltkit.pad.geometry.look_bands`), so
:math:`\Omega_{kP} = \sum_m c_{mk}\Omega_{mP}` takes the place of the bin
overlap. Where a look has no value at an energy, the union of that energy is
formed from the looks that have one.

Losses per hemisphere (pitch angles below 90 deg move along B, toward the
northern footpoint): lost north :math:`[0, \alpha_N]`, lost south
:math:`[180 - \alpha_S, 180]`, with the direction-resolved local cones
:math:`\sin^2\alpha_{N,S} = B_\mathrm{loc}/B_{N,S}`; the same exact split,
fractions of the same total and uncertainties as the populations above.
:math:`\alpha_B = \max(\alpha_N, \alpha_S)`, so the two lie inside the
precipitating range and add up to it when :math:`\alpha_N = \alpha_S` (centred
dipole).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .._threads import cores, map_slices
from ..errors import ConventionError
from . import _kernels
from .conventions import Prepared, check
from .geometry import edge_cosines, telescope_weights
from .losscones import (
    dipole_low_altitude_note,
    model_name,
    resolve_model,
    sample_loss_cones,
    time_coords,
)
from .outputs import (
    HEMI_NAMES,
    LONG_NAMES,
    NAMES,
    POPULATIONS,
    OutputBuffers,
    alloc_out,
    as_3d,
    hemisphere_row,
    n_outputs,
    output_names,
    output_units,
)
from .rows import mask_bad_rows, or_bits, overlap_rows, repartition_rows, sample_bits
from .samples import (
    COUNTED_FLAGS,
    INFINITE_VALUE_BIT,
    flag_b_local,
    flag_counts,
    mask_positions,
    position_mask,
)
from .values import value_problems

__all__ = ["FLAG_MEANINGS", "OUTPUT_NAMES", "OutputBuffers", "partition", "partition_slab"]

#: Names of the per-(time, energy) outputs (uncertainties add ``_err``); the losses per
#: hemisphere (``flux_lost_*``, ``fraction_lost_*``, with ``hemispheres=True``) come last.
OUTPUT_NAMES = tuple(NAMES + HEMI_NAMES)
#: Bits of ``partition_flag``.
FLAG_MEANINGS = {
    1: "precipitating_unsampled",
    2: "quasi_trapped_unsampled",
    4: "trapped_unsampled",
    8: "partial_coverage",
    16: "negative_flux_in_input",
    32: "no_valid_flux",
    64: "loss_cone_unknown",
    128: "fitted_fill_applied",
    **COUNTED_FLAGS,
}

#: samples per block of the compiled kernel (a few blocks per core: the threads stay busy
#: while the page faults of the fresh output memory are spread between them)
_BLOCK = 65536
#: columns of the value checks' counts per energy: valid flux values, negative flux values,
#: negative errors (the compiled kernel's three), infinite flux values, infinite errors
_N_STATS = 5


def _mask_infinite(a, raw_dtype, stats):
    """Return ``(a, rows)``: ``a`` with +-inf as NaN and the (n, E) rows that held one.

    ``a`` is returned unchanged (and ``rows`` None) when it holds no infinite
    value, as integer data never do; their number goes to ``stats[:, 4]``.
    """
    if np.dtype(raw_dtype).kind != "f":
        return a, None
    inf = np.isinf(a)
    if not inf.any():
        return a, None
    stats[:, 4] += inf.sum(axis=(0, 2))
    return np.where(inf, a.dtype.type(np.nan), a), inf.any(axis=2)


def _block_inputs(flux_blk, err_blk, c2f_blk, prep, dtype, stats, mask_err=False):
    """Return ``(x, s, err_bad, err_inf)``: flux and 1-sigma in canonical units, masked.

    ``err_bad`` (n, E) marks the rows whose negative counts were masked (with
    ``mask_err`` and Poisson errors; else None); ``err_inf`` (n, E) the rows
    whose infinite uncertainties (or counts) became NaN (else None).
    """
    x = prep.flux_mask.apply(flux_blk, dtype)
    s = None
    err_bad = err_inf = None
    if prep.error_source == "flux_err":
        s = prep.err_mask.apply(err_blk, dtype)
        s, err_inf = _mask_infinite(s, np.asarray(err_blk).dtype, stats)
    elif prep.error_source == "counts":
        counts = prep.counts_mask.apply(err_blk, dtype)
        counts, err_inf = _mask_infinite(counts, np.asarray(err_blk).dtype, stats)
        negative = counts < 0
        stats[:, 2] += negative.sum(axis=(0, 2))
        # Poisson: sigma_N = sqrt(N), with N = 0 counted as 1 (documented convention)
        s = (np.sqrt(np.maximum(counts, 1)) * c2f_blk).astype(dtype, copy=False)
        missing = np.isnan(counts)
        if mask_err:
            err_bad = negative.any(axis=2)
            missing |= negative
        s = np.where(missing, dtype.type(np.nan), s)
    return x, s, err_bad, err_inf


def _infinite_flux_rows(x, stats, n_finite):
    """Return the (n, E) rows of ``x`` holding +-inf (None if none); count them in ``stats``.

    ``n_finite`` is the number of finite values the kernel counted in ``x``:
    when it is every value, no pass is made (the common case).
    """
    if n_finite >= x.size:
        return None
    inf = np.isinf(x)
    if not inf.any():
        return None
    stats[:, 3] += inf.sum(axis=(0, 2))
    return inf.any(axis=2)


def _run_block(flux_blk, err_blk, c2f_blk, cones, look, *, prep, geom, opts, dtype,
               out=None, stats=None, flag=None, rf_blk=None, pos_blk=None):
    """Partition one time block into ``out`` (new (n_out, n, E) array if None).

    ``cones`` is ``(blc, dlc, lcn, lcs)`` per sample (deg). With ``flag``
    (int16, n * E) the flags go there instead of ``out[14]``. ``stats`` ((E, 5)
    int64) receives the value checks of the block: the compiled kernel's three
    (:func:`beltkit.pad._kernels.partition_block`), then the infinite flux
    values and the infinite uncertainties, which are masked (NaN) and flag
    their rows :data:`beltkit.pad.samples.INFINITE_VALUE_BIT`.
    """
    if stats is None:
        stats = np.zeros((np.shape(flux_blk)[1], _N_STATS), dtype=np.int64)
    err_before = int(stats[:, 2].sum())
    finite_before = int(stats[:, 0].sum())
    x, s, err_bad, err_inf = _block_inputs(flux_blk, err_blk, c2f_blk, prep, dtype, stats,
                                           mask_err=opts.get("mask_err", False))
    n, n_e = x.shape[:2]
    hemi = opts["hemispheres"]
    n_data = n_outputs(s is not None, hemi)
    rows = None
    if geom["kind"] == "telescope":
        rows = overlap_rows(x, look, geom["half"])
    x = np.ascontiguousarray(x)
    s = None if s is None else np.ascontiguousarray(s)
    ret3d = out is None
    if out is None:
        out = alloc_out(n_data, n, n_e, dtype)
    blc, dlc, lcn, lcs = (np.asarray(c, dtype=float) for c in cones)
    # dlc is raised to at least blc by partition_block
    wpre = None
    if geom["kind"] == "telescope":
        outer = np.minimum(blc + opts["band_deg"], 90.0)
        wpre = telescope_weights(np.asarray(look, dtype=float), geom["half"],
                                  edge_cosines(blc, np.maximum(dlc, blc), outer, lcn, lcs))
        cos_a1 = cos_a2 = np.zeros(x.shape[2])
        fold = 1.0
    else:
        cos_a1, cos_a2 = geom["cos_a1"], geom["cos_a2"]
        fold = 2.0 if geom["folded"] else 1.0
    _kernels.partition_block(x, s, wpre, cos_a1, cos_a2, fold, blc, dlc, opts["band_deg"],
                             out, stats, flag,
                             cones_ns=(lcn, lcs) if hemi else None,
                             hemi_row=hemisphere_row(s is not None, hemi))
    # the kernel takes +-inf flux for missing values (as NaN); their rows are flagged below
    inf_rows = _infinite_flux_rows(x, stats, int(stats[:, 0].sum()) - finite_before)
    if err_inf is not None:
        inf_rows = err_inf if inf_rows is None else (inf_rows | err_inf)
    if rows is not None:
        j = rows[0] * n_e + rows[1]
        sub = repartition_rows(rows, x, s, cones, look, geom, opts)
        out[:n_data, j] = sub
        if flag is not None:
            flag[j] = sub[14]
    fl = flag if flag is not None else out[14]
    mask_bad_rows(x, s, cones, look, geom, opts, out, fl, n_data, err_bad,
                   int(stats[:, 2].sum()) > err_before)
    or_bits(fl, sample_bits(flux_blk, rf_blk, pos_blk, prep, n, n_e))
    if inf_rows is not None:
        or_bits(fl, np.where(inf_rows, INFINITE_VALUE_BIT, 0).astype(np.int16).reshape(-1))
    return as_3d(out, n, n_e) if ret3d else out


# ------------------------------------------------------------------ assembly


def _check_engine(engine):
    """Accept ``engine`` "auto" or "numba" (the one compiled engine); refuse the rest."""
    if engine == "numpy":
        raise ValueError("engine='numpy' is no longer available: the numpy reference of the "
                         "partition moved to the tests (tests/_partition_reference.py), where "
                         "the compiled engine is checked against it; drop the 'engine' "
                         "argument to use the compiled engine")
    if engine not in ("auto", "numba"):
        raise ValueError(f"engine must be 'auto' or 'numba', got {engine!r}")


def _is_lazy(ds):
    names = ("flux", "flux_err", "counts", "counts_to_flux", "look_pitch_angle", "L", "mlat",
             "b_local", "position_geo")
    return any(ds[n].chunks is not None for n in names if n in ds.variables)


def _geometry(ds, prep):
    if prep.kind == "bins":
        a = np.radians(prep.edges)
        return {"kind": "bins", "cos_a1": np.cos(a[:, 0]), "cos_a2": np.cos(a[:, 1]),
                "folded": prep.folded}
    half = np.asarray(ds["look_half_angle"].values, dtype=float) * prep.angle_scale.get(
        "look_half_angle", 1.0)
    return {"kind": "telescope", "half": half}


def _arrays(ds, prep):
    """Return flux, error, conversion and look arrays ordered (time, energy, angle)."""
    adim = "look" if prep.kind == "telescope" else "pitch_angle"
    order = ("time", "energy", adim)
    flux = ds["flux"].transpose(*order)
    err = c2f = None
    if prep.error_source == "flux_err":
        err = ds["flux_err"].transpose(*order)
    elif prep.error_source == "counts":
        err = ds["counts"].transpose(*order)
        c2f = ds["counts_to_flux"].astype(float)
        from .conventions import flux_unit_factor

        c2f = c2f * flux_unit_factor(c2f.attrs["units"])
        c2f = c2f.broadcast_like(flux).transpose(*order)
    look = None
    if prep.kind == "telescope":
        look = ds["look_pitch_angle"].transpose("time", "look").astype(float)
        f = prep.angle_scale.get("look_pitch_angle", 1.0)
        if f != 1.0:
            look = look * f
    read_flag = ds["read_flag"].transpose(*order) if prep.has_read_flag else None
    return flux, err, c2f, look, read_flag


def _compute(flux, err, c2f, cones, look, prep, geom, opts, dtype, stats=None,
             buffers=None, read_flag=None, pos_bad=None):
    """Partition outputs ``(data, flags)``; ``cones`` is ``(blc, dlc, lcn, lcs)`` (DataArrays).

    ``read_flag`` (DataArray (time, energy, angle) or None) and ``pos_bad``
    (bool (time,) or None) add the bits of masked input samples.
    """
    nout = n_outputs(err is not None, opts["hemispheres"])
    lazy = any(getattr(a, "chunks", None) is not None
               for a in (flux, err, c2f, look) + tuple(cones) if a is not None)
    if lazy:
        import dask.array as dsa

        tchunks = flux.chunks[0] if flux.chunks is not None else None
        if tchunks is None:
            for a in tuple(cones) + (err, look):
                if a is not None and a.chunks is not None:
                    tchunks = a.chunks[0]
                    break

        def as_dask(a, ndim):
            if a is None:
                return None
            data = a.data
            if not isinstance(data, dsa.Array):
                data = dsa.from_array(np.asarray(data), chunks=(tchunks,) + (-1,) * (ndim - 1))
            return data.rechunk((tchunks,) + (-1,) * (ndim - 1))

        fx = as_dask(flux, 3)
        ex = as_dask(err, 3)
        cx = as_dask(c2f, 3)
        bx, dx, nx, sx = (as_dask(c, 1) for c in cones)
        lx = as_dask(look, 2)
        rx = as_dask(read_flag, 3)
        px = None
        if pos_bad is not None:
            px = dsa.from_array(np.asarray(pos_bad, dtype=bool), chunks=(tchunks,))

        def func(f, e, c, b, d, cn, cs, lk, rf, pb):
            return _run_block(f, e, c, (b, d, cn, cs), lk, prep=prep, geom=geom, opts=opts,
                              dtype=dtype, rf_blk=rf, pos_blk=pb)

        args = [fx, "tep", ex, "tep" if ex is not None else None,
                cx, "tep" if cx is not None else None, bx, "t", dx, "t", nx, "t", sx, "t",
                lx, "tk" if lx is not None else None, rx, "tep" if rx is not None else None,
                px, "t" if px is not None else None]
        data = dsa.blockwise(func, "vte", *args, new_axes={"v": nout}, dtype=dtype,
                             concatenate=True)
        return data, None
    fv = flux.values
    ev = err.values if err is not None else None
    cv = c2f.values if c2f is not None else None
    # the same memory for several cones (the dipole's) stays shared: the kernel sees it
    cv4 = tuple(np.asarray(c.values, dtype=float) for c in cones)
    lv = look.values if look is not None else None
    rv = read_flag.values if read_flag is not None else None
    n_t, n_e = fv.shape[:2]
    if buffers is not None:
        buf, flag = buffers.take(nout, n_t, n_e, dtype)
    else:
        buf = alloc_out(nout, n_t, n_e, dtype)
        flag = np.empty(n_t * n_e, dtype=np.int16)  # written once, in its final dtype

    def one(sl):
        block_stats = np.zeros((n_e, _N_STATS), dtype=np.int64)
        _run_block(fv[sl], None if ev is None else ev[sl], None if cv is None else cv[sl],
                   tuple(c[sl] for c in cv4), None if lv is None else lv[sl], prep=prep, geom=geom,
                   opts=opts, dtype=dtype, out=buf[:, sl.start * n_e: sl.stop * n_e],
                   stats=block_stats, flag=flag[sl.start * n_e: sl.stop * n_e],
                   rf_blk=None if rv is None else rv[sl],
                   pos_blk=None if pos_bad is None else pos_bad[sl])
        return block_stats

    # the compiled kernel releases the GIL: blocks run on every core at once; at least
    # two blocks per core (a slab of a file keeps every core busy too), their number a
    # multiple of the cores and their lengths equal (no core left with a short last one)
    n_cores = cores()
    n_blocks = max(2 * n_cores, -(-n_t // _BLOCK))
    n_blocks = -(-n_blocks // n_cores) * n_cores
    block = max(4096, -(-n_t // n_blocks))
    parts = map_slices(one, n_t, block, parallel=True)
    if stats is not None:
        for block_stats in parts:
            stats += block_stats
    return as_3d(buf, n_t, n_e), flag.reshape(n_t, n_e)


def _energy_coords(ds, prep):
    """Return the outputs' energy coordinates: centres (edges where given) or the 2-D table."""
    if prep.energy_kev is None:  # record-varying table: each sample keeps its own energies
        ce = ds["channel_energy"].variable
        values = ce.data.astype(float) * prep.energy_scale if prep.energy_scale != 1.0 else (
            ce.data.astype(float))
        return {"channel_energy": xr.Variable(
            ("time", "energy"), values,
            {"units": "keV", "long_name": "kinetic energy of each channel at each sample"})}
    attrs = {"units": "keV", "long_name": "kinetic energy"}
    coords = {}
    if prep.energy_bnds_kev is not None:
        attrs["bounds"] = "energy_bnds"
        bdim = ds["energy_bnds"].dims[1]
        coords["energy_bnds"] = xr.Variable(("energy", bdim), prep.energy_bnds_kev,
                                            encoding={"_FillValue": None})
    coords["energy"] = xr.Variable("energy", prep.energy_kev, attrs)
    return coords


def _fill_block(flux, amp, index, blc, dlc, *, mask, edges, folded):
    from .fill import unsampled_fill

    x = mask.apply(flux, np.float64)
    return unsampled_fill(x, np.asarray(amp, float), np.asarray(index, float),
                          np.asarray(blc, float), np.asarray(dlc, float), edges, folded)


def _apply_fill(out, ds, prep, lc, model, altitude_km, allow_negative):
    """Add the sine-power fit over each population's unsampled solid angle (opt-in)."""
    from .fit import fit_sine_power

    fit = fit_sine_power(ds, model=model, altitude_km=altitude_km,
                         allow_negative=allow_negative)
    flux = ds["flux"].transpose("time", "energy", "pitch_angle").reset_coords(drop=True)
    amp = fit["sine_amplitude"].reset_coords(drop=True)
    idx = fit["sine_index"].reset_coords(drop=True)
    blc = lc["blc_local"].reset_coords(drop=True)
    dlc = lc["dlc_local"].reset_coords(drop=True)
    if flux.chunks is not None:
        flux = flux.chunk({"energy": -1, "pitch_angle": -1})
        tch = {"time": flux.chunksizes["time"]}
        amp, idx, blc, dlc = (a.chunk(tch) for a in (amp, idx, blc, dlc))
    fill = xr.apply_ufunc(
        _fill_block, flux.rename({"pitch_angle": "_p"}), amp, idx, blc, dlc,
        kwargs={"mask": prep.flux_mask, "edges": prep.edges, "folded": prep.folded},
        input_core_dims=[["energy", "_p"], ["energy"], ["energy"], [], []],
        output_core_dims=[["energy", "_pop"]], dask="parallelized", output_dtypes=[float],
        dask_gufunc_kwargs={"output_sizes": {"_pop": 3}},
    ).transpose("time", "energy", "_pop")
    filled = {}
    any_fill = None
    for k, pop in enumerate(POPULATIONS):
        name = f"flux_{pop}"
        f = fill.isel(_pop=k, drop=True)
        use = np.isfinite(f) & (f > 0)
        filled[pop] = xr.where(use, out[name].fillna(0.0) + f, out[name])
        any_fill = use if any_fill is None else (any_fill | use)
    dtype = out["flux_trapped"].dtype
    total = filled["precipitating"] + filled["quasi_trapped"] + filled["trapped"]
    for pop in POPULATIONS:
        out[f"flux_{pop}"] = filled[pop].astype(dtype).assign_attrs(out[f"flux_{pop}"].attrs)
        frac = xr.where(total > 0, filled[pop] / total, np.nan)
        out[f"fraction_{pop}"] = frac.astype(dtype).assign_attrs(out[f"fraction_{pop}"].attrs)
    out["omni_flux"] = xr.where(any_fill, total, out["omni_flux"]).astype(dtype).assign_attrs(
        out["omni_flux"].attrs)
    flag = out["partition_flag"]
    out["partition_flag"] = (flag | xr.where(any_fill, 128, 0).astype(flag.dtype)).assign_attrs(
        flag.attrs)
    return out


def partition(ds, model="auto", altitude_km=100.0, *, filling_band_deg=10.0,
              allow_negative=False, engine="auto", fill=None, hemispheres=False,
              strict=True):
    r"""Split a pitch-angle flux dataset into precipitating, quasi-trapped and trapped flux.

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset following ``docs/conventions.md`` (pitch-angle bins or
        telescopes). Numpy- or dask-backed (chunked along ``time``); never
        modified.
    model : "auto", None, "dipole", "igrf" or FieldModel, optional
        Field model for the loss cones. "auto" (default): the IGRF at each
        sample's time where the dataset carries ``position_geo``, else the
        centred dipole (:func:`beltkit.pad.losscones.resolve_model`).
        None/"dipole" with ``L`` and ``mlat`` uses the centred-dipole closed
        forms (drift loss cone = bounce loss cone; ``L`` must be a dipole L,
        see ``L_definition`` in docs/conventions.md); a model object or
        "igrf" uses :func:`beltkit.field.loss_cones`. The model used is
        recorded in the attribute ``beltkit_field_model``.
    altitude_km : float
        Altitude of the footpoints where particles are lost, in km above the
        sphere of radius R_E = 6371.2 km (not the WGS-84 ellipsoid).
    filling_band_deg : float, keyword-only
        Width of the band just outside the bounce loss cone,
        :math:`[\alpha_B, \alpha_B + \Delta]` (capped at 90 deg), whose mean
        flux is the denominator of ``loss_cone_filling``.
    allow_negative : bool, keyword-only
        Keep negative flux values (flag bit 16 of ``partition_flag``) instead
        of refusing the dataset (or, with ``strict=False``, masking them).
    engine : {"auto", "numba"}, keyword-only
        Both use the compiled (numba) kernel, the package's one engine.
        ``"numpy"`` raises a ValueError: the plain numpy reference that the
        kernel is checked against lives with the tests
        (``tests/_partition_reference.py``).
    fill : {None, "sine_power"}, keyword-only
        None (default): nothing is extrapolated. "sine_power": add the fitted
        :math:`A\sin^n\alpha` of the trapped bins over each population's
        unsampled solid angle (:mod:`beltkit.pad.fill`), recompute fractions
        and omnidirectional flux, and set flag bit 128. Coverage and the
        ``_err`` outputs still describe the measured part only. Pitch-angle
        bins only.
    hemispheres : bool, keyword-only
        True: also compute the losses per hemisphere, ``flux_lost_north``,
        ``flux_lost_south``, ``fraction_lost_north``, ``fraction_lost_south``
        (and their ``_err``), in the same pass. False (default) leaves them
        out: they add a quarter to the output memory and about as much to
        the time of a large partition. Summaries include them on request.
    strict : bool, keyword-only
        True (default): any per-sample problem refuses the dataset. False:
        only structural problems refuse it; negative flux values (unless
        ``allow_negative``), negative uncertainties, infinite (+-inf) flux
        values and uncertainties (bit 512, as out of the valid range) and
        positions outside their physical range are masked, the outputs they
        touch flagged (:data:`beltkit.pad.samples.SAMPLE_FLAGS`), and the
        number of time samples with each bit in ``beltkit_samples_<meaning>``.
        Flux values the reader masked (``read_flag``: fill, out of the valid
        range, quality-rejected) are flagged either way; with ``strict`` the
        last two refuse the dataset.

    Returns
    -------
    xarray.Dataset
        Per time: ``blc_local``, ``dlc_local``, ``blc_equatorial``,
        ``dlc_equatorial``, ``loss_cone_north``, ``loss_cone_south`` (degree),
        ``b_local``, ``b_min`` (nT), ``L``, ``mlat``, ``mlt``. Per time and
        energy: ``flux_precipitating``, ``flux_quasi_trapped``,
        ``flux_trapped``, ``omni_flux`` (cm-2 s-1 keV-1, over the measured
        solid angle), ``fraction_*``, ``coverage_*`` (1), ``solid_angle_*``
        (sr), ``loss_cone_filling`` (1), ``partition_flag`` (bits in
        :data:`FLAG_MEANINGS`), the losses per hemisphere ``flux_lost_north``,
        ``flux_lost_south`` (cm-2 s-1 keV-1), ``fraction_lost_north``,
        ``fraction_lost_south`` (1) with ``hemispheres=True``, and, when
        ``flux_err`` or ``counts`` exist, each uncertainty as ``<name>_err``.
        Float32 input gives float32 outputs. Dask input gives dask outputs.
        Attributes record the field model used (``beltkit_field_model``) and,
        when the centred dipole is used for samples below 2,000 km altitude, a
        note that it has no
        quasi-trapped population there (``beltkit_field_model_note``).

    Raises
    ------
    ConventionError
        Listing every problem of the dataset at once.

    Notes
    -----
    An unsampled population (coverage 0 with non-zero solid angle) gives NaN
    flux and fractions and sets its flag bit; an empty population (zero solid
    angle, e.g. quasi-trapped in a dipole) gives 0 with coverage 1. Nothing
    is extrapolated into unsampled solid angle. See the module docstring for
    the formulas.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> edges = np.linspace(0, 180, 13)
    >>> ds = xr.Dataset(
    ...     {"flux": (("time", "energy", "pitch_angle"), np.ones((1, 1, 12)),
    ...               {"units": "cm-2 s-1 sr-1 keV-1"}),
    ...      "pitch_angle_bnds": (("pitch_angle", "nv"), np.stack([edges[:-1], edges[1:]], 1)),
    ...      "energy_bnds": (("energy", "nv"), [[90.0, 110.0]]),
    ...      "L": ("time", [4.0], {"units": "1"}), "mlat": ("time", [0.0], {"units": "degree"})},
    ...     coords={"time": [np.datetime64("2026-01-01", "ns")],
    ...             "energy": ("energy", [100.0], {"units": "keV"}),
    ...             "pitch_angle": ("pitch_angle", edges[:-1] + 7.5, {"units": "degree"})})
    >>> out = partition(ds)
    >>> blc = np.radians(float(out.blc_local[0]))
    >>> bool(np.isclose(float(out.fraction_precipitating[0, 0]), 1 - np.cos(blc)))
    True
    """
    out, _ = partition_slab(ds, model, altitude_km, filling_band_deg=filling_band_deg,
                        allow_negative=allow_negative, engine=engine, fill=fill,
                        hemispheres=hemispheres, strict=strict)
    if out["partition_flag"].chunks is None:
        for name, n in flag_counts(out["partition_flag"]).items():
            out.attrs[f"beltkit_samples_{name}"] = n
    return out


def partition_slab(ds, model="auto", altitude_km=100.0, *, filling_band_deg=10.0,
               allow_negative=False, engine="auto", fill=None, defer_value_check=False,
               buffers=None, hemispheres=False, prepared=None, strict=True, model_note=None):
    """Partition a dataset or a slab of a file, optionally leaving the value checks to the caller.

    The entry of callers that partition a file slab by slab (``beltkit
    summarize``); :func:`partition` is this function's ``out``.

    Returns ``(out, pending)``. The engine counts the values of eager data
    while it computes the outputs. With ``defer_value_check`` (eager data
    only: a file partitioned slab by slab) nothing is raised here:
    ``pending`` is ``(stats, verify)``, the engine's count, a (3, energy)
    integer array (valid values, negative values, negative errors), and a
    function that raises the :class:`ConventionError` listing every problem
    of such counts; the caller sums ``stats`` over the slabs and calls
    ``verify`` once. Without ``defer_value_check`` ``pending`` is None and
    the checks have been made (dask data: by the validator, before the
    partition).
    ``buffers`` (an :class:`OutputBuffers`) gives eager data the memory of
    the previous call's outputs, which are overwritten. ``hemispheres`` is
    as for :func:`partition` (summaries ask for it with ``hemispheres=True``).
    ``strict`` is as for :func:`partition` (with ``prepared``, the strictness
    it was made with applies).
    ``prepared``, the :class:`Prepared` result of
    :func:`beltkit.pad.conventions.check` on the whole file (with the same
    model), is trusted instead of validating ``ds`` again: a file summarized
    slab by slab is validated once. ``model_note`` (str), the whole file's
    :func:`~beltkit.pad.losscones.dipole_low_altitude_note`, replaces the slab's.
    """
    _check_engine(engine)  # the cheap option checks first
    model = resolve_model(ds, model)
    lazy = _is_lazy(ds)
    if lazy and (defer_value_check or prepared is not None):
        raise ValueError("defer_value_check= and prepared= are for eager data (a file "
                         "partitioned slab by slab); dask data are checked by the validator")
    # eager data: the value checks are gathered by the engine in its single pass
    if prepared is not None:  # validated once by the caller, on the whole file
        prep: Prepared = prepared
    else:
        prep = check(ds, model=model, allow_negative=allow_negative, check_values=lazy,
                     strict=strict)
    pos_bad = None if prep.strict else position_mask(ds, prep.other_scale)
    # samples at impossible positions: no loss cone (NaN), flagged position_out_of_range
    lc = sample_loss_cones(ds if pos_bad is None else mask_positions(ds, pos_bad), prep,
                           model=model, altitude_km=altitude_km)
    flux, err, c2f, look, read_flag = _arrays(ds, prep)
    dtype = np.dtype(np.float32) if flux.dtype == np.float32 else np.dtype(np.float64)
    geom = _geometry(ds, prep)
    if fill not in (None, "sine_power"):
        raise ValueError(f"fill must be None or 'sine_power', got {fill!r}")
    if fill is not None and prep.kind != "bins":
        raise ConventionError(["flux: fill='sine_power' needs pitch-angle bins, not telescope "
                               "looks"], ds.encoding.get("source"))
    opts = {"band_deg": float(filling_band_deg),
            "hemispheres": bool(hemispheres),
            "mask_negative": not prep.strict and not allow_negative,
            "mask_err": not prep.strict}
    stats = None if lazy else np.zeros((ds.sizes["energy"], _N_STATS), dtype=np.int64)
    cones = tuple(lc[k] for k in ("blc_local", "dlc_local", "loss_cone_north", "loss_cone_south"))
    data, flags = _compute(flux, err, c2f, cones, look, prep, geom, opts, dtype, stats,
                           buffers=buffers, read_flag=read_flag, pos_bad=pos_bad)
    source = ds.encoding.get("source")

    def verify(totals):
        """Raise the ConventionError of the value checks from the engine's counts."""
        valid, neg, neg_err, inf, inf_err = (np.asarray(t) for t in totals)
        problems = value_problems(prep.energy_kev, valid > 0, int(neg.sum()), int(neg_err.sum()),
                                  prep.error_source, allow_negative, strict=prep.strict,
                                  n_infinite=int(inf.sum()), n_err_infinite=int(inf_err.sum()))
        if problems:
            raise ConventionError(problems, source)

    pending = None
    if stats is not None:
        if defer_value_check:
            pending = (stats.T.copy(), verify)
        else:
            verify(stats.T)
    with_err = err is not None
    names = output_names(with_err, opts["hemispheres"])
    dims = ("time", "energy")
    out_vars = {}
    for k, name in enumerate(names):
        values = data[k]
        if name == "partition_flag":
            values = flag_b_local(flags if flags is not None else values.astype(np.int16), ds, lc)
        attrs = {}
        if name.endswith("_err"):
            base = name[:-4]
            attrs["long_name"] = f"uncertainty (1 sigma) of {base.replace('_', ' ')}"
            attrs["units"] = output_units(base)
        elif name == "partition_flag":
            attrs["long_name"] = LONG_NAMES[name]
            attrs["flag_masks"] = np.array(list(FLAG_MEANINGS), dtype=np.int16)
            attrs["flag_meanings"] = " ".join(FLAG_MEANINGS.values())
        else:
            attrs["long_name"] = LONG_NAMES[name]
            attrs["units"] = output_units(name)
            if with_err and f"{name}_err" in names:
                attrs["ancillary_variables"] = f"{name}_err"
        out_vars[name] = xr.Variable(dims, values, attrs)
    for name in lc.data_vars:
        out_vars[name] = lc[name].variable
    out = xr.Dataset(out_vars, coords=time_coords(ds)).assign_coords(_energy_coords(ds, prep))
    out.attrs = {
        "title": "beltkit pitch-angle partition",
        "beltkit_field_model": model_name(model),
        "footpoint_altitude_km": float(altitude_km),
        "beltkit_filling_band_deg": float(filling_band_deg),
        "beltkit_assumptions": "gyrotropic flux; populations from the bounce (min of the two "
                               "footpoint fields) and drift (drift-shell minimum) loss cones",
        "beltkit_uncertainty_source": prep.error_source or "none",
        "beltkit_fill": fill or "none",
    }
    note = dipole_low_altitude_note(ds, prep, model) if model_note is None else model_note
    if note:
        out.attrs["beltkit_field_model_note"] = note
    if fill == "sine_power":
        out = _apply_fill(out, ds, prep, lc, model, altitude_km, allow_negative)
    return out, pending
