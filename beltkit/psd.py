r"""Phase-space density at fixed adiabatic invariants, and radial profiles against L*.

The trade tells local acceleration from radial transport by comparing the
phase-space density :math:`f` at fixed first and second invariants
:math:`(\mu, K)` as a function of Roederer's :math:`L^*`, pass by pass: a peak
in :math:`f(L^*)` that grows in place points to local acceleration, a
monotone gradient that moves inward to radial diffusion (e.g. Green &
Kivelson 2004, J. Geophys. Res. 109, A03213; Chen et al. 2007, Nature
Physics 3, 614).

For each sample and each requested :math:`(\mu, K)`:

1. :math:`K` fixes the equatorial pitch angle :math:`\alpha_{eq}` (and the
   mirror field :math:`B_m`), :math:`\mu` then the momentum,
   :math:`p^2 = 2 m_0 B_m \mu` (first invariant at the mirror point);
2. the flux, mapped to the magnetic equator by
   :func:`beltkit.pad.to_equatorial` (Liouville), is turned into
   :math:`f = C j / p^2` (:func:`beltkit.particles.phase_space_density`) on
   the measured energies and interpolated linearly in :math:`\ln f` against
   :math:`\ln E` and :math:`\alpha_{eq}`;
3. :math:`L^*` of that drift shell: :math:`L` itself in the centred dipole
   (where :math:`L^* = L`), else :func:`beltkit.field.lstar` at a coarse
   cadence, linearly interpolated in time to the samples.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from . import dipole
from .constants import B0_NT, GAUSS_PER_NT, R_E_KM
from .errors import PhysicsError
from .particles import PSD_CONSTANT, PSD_UNITS, get_species
from .units import K_UNITS, MU_UNITS, l_shell_factor

__all__ = ["PSD_FLAG_MEANINGS", "at_fixed_invariants", "passes", "radial_profiles"]

#: Bits of ``psd_flag`` (CF ``flag_masks``) and their meanings.
PSD_FLAG_MEANINGS = {
    1: "outside_measured_energy_range",
    2: "outside_measured_pitch_angles",
    4: "inside_loss_cone",
    8: "lstar_undefined",
}



def _as_1d(values, name):
    a = np.atleast_1d(np.asarray(values, dtype=float))
    if a.ndim != 1 or a.size == 0 or not np.all(np.isfinite(a)):
        raise PhysicsError(f"argument {name!r} must be a finite scalar or 1-D list of values")
    return a


def _fold(flux):
    """Fold (..., 2G grid symmetric about 90) about 90 deg: geometric mean of both halves."""
    g = flux.shape[-1] // 2
    lo = flux[..., :g]
    hi = flux[..., g:][..., ::-1]
    with np.errstate(invalid="ignore", divide="ignore"):
        both = np.isfinite(lo) & np.isfinite(hi) & (lo > 0) & (hi > 0)
        gm = np.sqrt(np.where(both, lo * hi, np.nan))
    return np.where(both, gm, np.where(np.isfinite(lo), lo, hi))


def _grid_cells(lo_hi):
    """Grid points (0.5 + j deg, j in 0..89) bracketing every [lo, hi] of alpha_eq."""
    js = []
    for lo, hi in np.asarray(lo_hi, dtype=float).reshape(2, -1).T:
        if not (np.isfinite(lo) and np.isfinite(hi)):
            continue
        j0 = int(np.clip(np.floor(lo - 0.5), 0, 89))
        j1 = int(np.clip(np.floor(hi - 0.5) + 1, 0, 89))
        js.append(np.arange(j0, j1 + 1))
    j = np.unique(np.concatenate(js)) if js else np.array([44, 45])
    if j.size < 2:
        j = np.unique(np.concatenate([j, np.clip(j + 1, 0, 89), np.clip(j - 1, 0, 89)]))
    return 0.5 + j.astype(float)


def _interp_block(flux, err, e_q, a_q, blc, lstar, *, energy, p2_grid, grid):
    """Interpolate ln f at (e_q, a_q) per sample; flux (n, E, 2G) -> f (n, mu, k)."""
    n, n_e, _ = flux.shape
    fl = _fold(np.asarray(flux, dtype=float))
    er = _fold(np.asarray(err, dtype=float))
    with np.errstate(invalid="ignore", divide="ignore"):
        lnf = np.log(PSD_CONSTANT * fl / p2_grid[None, :, None])
        rel = er / fl
    # energy: linear in ln E between measured centres
    ln_e = np.log(energy)
    with np.errstate(invalid="ignore", divide="ignore"):
        x = np.log(e_q)
    out_e = ~((x >= ln_e[0] - 1e-12) & (x <= ln_e[-1] + 1e-12))
    i = np.clip(np.searchsorted(ln_e, x) - 1, 0, n_e - 2)
    we = np.clip((x - ln_e[i]) / (ln_e[i + 1] - ln_e[i]), 0.0, 1.0)
    # pitch angle: linear in alpha_eq on the folded 1-degree grid (clamped within the
    # outer half-degree, which the end cells still cover)
    a = np.clip(a_q, 0.5, 89.5)
    out_a = ~(a_q >= 0.0)
    j = np.clip(np.searchsorted(grid, a) - 1, 0, grid.size - 2)
    # grid cells are 1 degree wide by construction (_grid_cells)
    wa = np.clip((a - grid[j]) / (grid[j + 1] - grid[j]), 0.0, 1.0)
    rows = np.arange(n)[:, None, None]
    ii = np.where(out_e, 0, i)
    jj = np.broadcast_to(j[:, None, :], ii.shape)
    waa = np.broadcast_to(wa[:, None, :], ii.shape)
    acc = np.zeros(ii.shape)
    var = np.zeros(ii.shape)
    for de, w_e in ((0, 1.0 - we), (1, we)):
        for da, w_a in ((0, 1.0 - waa), (1, waa)):
            w = w_e * w_a
            v = lnf[rows, ii + de, jj + da]
            r = rel[rows, ii + de, jj + da]
            # a corner without a value only counts when its weight is zero
            v = np.where(w > 0, v, 0.0)
            acc = acc + w * v
            var = var + np.where(w > 0, (w * r) ** 2, 0.0)
    f = np.exp(acc)
    missing_a = ~np.isfinite(f) & ~out_e
    f = np.where(out_e | missing_a, np.nan, f)
    f_err = f * np.sqrt(var)
    flag = np.where(out_e, 1, 0) | np.where(missing_a | out_a[:, None, :], 2, 0)
    with np.errstate(invalid="ignore"):
        flag = flag | np.where((a_q < blc[:, None])[:, None, :], 4, 0)
    flag = flag | np.where(~np.isfinite(lstar)[:, None, :], 8, 0)
    return f, f_err, flag.astype(np.int8)


def _energy_from_mu(mu, b_m_nt, species):
    """Kinetic energy (keV) with first invariant mu (MeV/G) mirroring at B_m (nT)."""
    e0 = get_species(species).rest_energy_kev * 1e-3
    p2 = 2.0 * e0 * b_m_nt * GAUSS_PER_NT * mu
    return p2 / (np.sqrt(p2 + e0 * e0) + e0) * 1e3


def _model_nodes(ds, model, k, lstar_cadence_s, altitude_km, n_mlt, trace_options,
                 lstar_method="fast"):
    """alpha_eq (deg), ln B_m and L* at coarse time nodes (eager), for each K."""
    from .field import lstar
    from .field.models import as_model
    from .field.shellsearch import integral_invariant_many
    from .field.trace import trace_lines
    from .units import conversion_factor

    if "position_geo" not in ds.variables:
        raise PhysicsError(
            "at_fixed_invariants with a field model needs the spacecraft position "
            "'position_geo' (time, 3) in GEO km; add it, or use model='dipole' with L and mlat"
        )
    m = as_model(model)
    pos = ds["position_geo"]
    factor = conversion_factor(pos.attrs.get("units", "km"), "km") or 1.0
    time = ds["time"].values
    n = time.size
    ts = (time - time[0]) / np.timedelta64(1, "s")
    step = max(1, int(round(lstar_cadence_s / max(np.median(np.diff(ts)) if n > 1 else 1.0,
                                                  1e-9))))
    nodes = np.unique(np.concatenate([np.arange(0, n, step), [n - 1]]))
    xyz = np.asarray(pos.isel(time=nodes).values, dtype=float) * factor
    tn = time[nodes]
    lines = trace_lines(m, xyz, tn, altitude_km, arg_name="position_geo", **trace_options)
    b_loc = lines.b_start
    b_min = lines.b_min
    weak = np.fmin(lines.b_foot_north, lines.b_foot_south)
    # K against the local pitch angle on a grid between the loss cone and 90 deg,
    # tabulated as sqrt(K) against cos(alpha) (close to linear near 90 deg; K falls
    # monotonically with alpha), inverted by a monotone cubic (PCHIP), then one secant
    # correction with K evaluated exactly at the interpolated angle
    from scipy.interpolate import PchipInterpolator

    with np.errstate(invalid="ignore"):
        a_lc = np.degrees(np.arcsin(np.sqrt(np.clip(b_loc / weak, 0.0, 1.0))))
    u = np.linspace(0.0, 1.0, 32)
    a_grid = a_lc[:, None] + (90.0 - a_lc[:, None]) * np.sin(0.5 * np.pi * u)[None, :]
    a_grid[:, 0] += 1e-6

    def k_at(alpha):
        b = b_loc[:, None] / np.sin(np.radians(alpha)) ** 2
        # I by the compiled kernel, one column of mirror fields at a time (same values as
        # lines.integral_invariant)
        i_km = np.stack([integral_invariant_many(lines, b[:, c]) for c in range(b.shape[1])],
                        axis=1)
        with np.errstate(invalid="ignore"):
            return np.sqrt(b * GAUSS_PER_NT) * i_km / R_E_KM

    kk = k_at(a_grid)
    kk[:, -1] = np.where(np.isfinite(kk[:, -1]), kk[:, -1], 0.0)
    sk = np.sqrt(np.fmax(kk, 0.0))
    ca = np.cos(np.radians(a_grid))
    c_loc = np.full((nodes.size, k.size), np.nan)
    slope = np.full((nodes.size, k.size), np.nan)
    for r in range(nodes.size):  # one small interpolant per node (nodes are few)
        good = np.isfinite(sk[r])
        xs, ys = sk[r][good][::-1], ca[r][good][::-1]
        keep = np.concatenate([[True], np.diff(xs) > 0]) if xs.size else xs
        xs, ys = xs[keep], ys[keep]
        if xs.size < 3:
            continue
        fn = PchipInterpolator(xs, ys, extrapolate=False)
        c_loc[r] = fn(np.sqrt(k))
        slope[r] = fn.derivative()(np.sqrt(k))
    with np.errstate(invalid="ignore"):
        a_loc = np.degrees(np.arccos(np.clip(c_loc, 0.0, 1.0)))
        k_star = k_at(np.where(np.isfinite(a_loc), np.fmax(a_loc, 1e-9), 90.0))
        k_star = np.where(a_loc >= 90.0, 0.0, k_star)
        c_new = c_loc + (np.sqrt(k)[None, :] - np.sqrt(k_star)) * slope
        c_loc = np.where(np.isfinite(c_new), np.clip(c_new, 0.0, 1.0), c_loc)
        a_loc = np.degrees(np.arccos(c_loc))
    a_loc = np.where(a_loc > 0, a_loc, np.nan)
    b_mk = b_loc[:, None] / np.sin(np.radians(a_loc)) ** 2
    with np.errstate(invalid="ignore"):
        a_eq = np.degrees(np.arcsin(np.sqrt(np.clip(b_min[:, None] / b_mk, 0.0, 1.0))))
    pos_nk = np.broadcast_to(xyz[:, None, :], (nodes.size, k.size, 3))
    ls = lstar(m, pos_nk, tn[:, None], np.where(np.isfinite(a_loc), a_loc, 90.0),
               altitude_km=altitude_km, n_mlt=n_mlt, method=lstar_method, **trace_options)
    lst = np.where(np.isfinite(a_loc), ls["lstar"].values, np.nan)
    # interpolate to the samples, linearly in time
    a_s = np.stack([np.interp(ts, ts[nodes], a_eq[:, j]) for j in range(k.size)], -1)
    lb_s = np.stack([np.interp(ts, ts[nodes], np.log(b_mk[:, j])) for j in range(k.size)], -1)
    l_s = np.stack([np.interp(ts, ts[nodes], lst[:, j]) for j in range(k.size)], -1)
    return a_s, np.exp(lb_s), l_s, float(np.median(np.diff(ts[nodes]))) if nodes.size > 1 \
        else 0.0, m


def at_fixed_invariants(ds, mu_mev_per_g, k_g05_re, model=None, *, species="electron",
                        lstar_cadence_s=60.0, altitude_km=100.0, n_mlt=24, lstar_method="fast",
                        **trace_options):
    r"""Phase-space density at fixed first and second invariants, with L*, per sample.

    .. math::

        K \;\to\; \alpha_{eq},\ B_m, \qquad p^2 = 2 m_0 B_m \mu, \qquad
        f = C\,\frac{j_{eq}(E, \alpha_{eq})}{p^2}

    Parameters
    ----------
    ds : xarray.Dataset
        Flux dataset with pitch-angle bins (``docs/conventions.md``): ``L``
        and ``mlat`` for the centred dipole, ``position_geo`` for a field
        model. Not modified; dask-backed data stay lazy.
    mu_mev_per_g : float or 1-D array_like
        First invariants :math:`\mu` in MeV/G.
    k_g05_re : float or 1-D array_like
        Second invariants :math:`K` in G^(1/2) R_E.
    model : None, "dipole", "igrf" or FieldModel
        ``None``/``"dipole"``: centred dipole closed forms
        (:func:`beltkit.dipole.invariants_to_pitch_energy`, :math:`L^* = L`);
        otherwise :math:`K(\alpha)` on each traced line and
        :func:`beltkit.field.lstar`, at a coarse cadence.
    species : str, keyword-only
        Particle species of the flux.
    lstar_cadence_s : float, keyword-only
        Cadence (s) of the field-line work for a field model: the pitch angle
        and mirror field that carry each K, and L*, are computed at samples
        this far apart (and the last sample) and interpolated linearly in time
        (ln B_m linearly) to every sample.
    altitude_km : float, keyword-only
        Stop (loss) altitude for loss cones and drift shells, in km above the
        sphere of radius R_E = 6371.2 km (:data:`beltkit.constants.R_E_KM`),
        not the ellipsoid.
    n_mlt : int, keyword-only
        MLTs of the drift-shell search (:func:`beltkit.field.lstar`).
    lstar_method : {"fast", "exact"}, keyword-only
        ``method`` of :func:`beltkit.field.lstar` (the fast path agrees with
        the exact one to ~1e-6 in L*).
    **trace_options
        Passed to the field-line tracer.

    Returns
    -------
    xarray.Dataset
        Dimensions ``(time, mu, k)``: ``psd`` in :math:`(c/(\mathrm{cm\,MeV}))^3`
        (units attribute :data:`beltkit.particles.PSD_UNITS`), ``psd_err``
        (1 sigma, from ``flux_err`` or Poisson counts; NaN without either),
        ``psd_flag`` (bits :data:`PSD_FLAG_MEANINGS`), ``energy`` (keV);
        ``(time, k)``: ``alpha_eq`` (deg), ``lstar``; coordinates ``mu``, ``k``.

    Notes
    -----
    The flux is mapped to the equator by :func:`beltkit.pad.to_equatorial`
    on the cells of a 1-degree grid that the requested K reach (from the
    range of :math:`\alpha_{eq}` over the data, one small eager pass over the
    position columns), folded about 90 deg (geometric mean of both halves
    where both are measured), converted to :math:`f` at the measured
    energies and interpolated bilinearly in :math:`(\ln E, \alpha_{eq})` in
    :math:`\ln f`; its relative uncertainty is propagated with the same
    weights. Outside the measured energies the value is NaN (flag 1); where
    a needed grid value is missing (unsampled or unreachable pitch angles)
    it is NaN (flag 2); inside the equatorial bounce loss cone it is kept
    and flagged (4); where L* is undefined it is kept and flagged (8).
    The inverse problem follows Schulz & Lanzerotti (1974), Roederer (1970).
    """
    from .pad import to_equatorial

    mu = _as_1d(mu_mev_per_g, "mu_mev_per_g")
    k = _as_1d(k_g05_re, "k_g05_re")
    if np.any(mu <= 0) or np.any(k < 0):
        raise PhysicsError("mu_mev_per_g must be > 0 MeV/G and k_g05_re >= 0 G^(1/2) R_E")
    dipole_path = model is None or (isinstance(model, str) and model.strip().lower() == "dipole")
    sp = get_species(species)
    mu_da = xr.DataArray(mu, dims="mu")
    k_da = xr.DataArray(k, dims="k")
    if dipole_path:
        if "L" not in ds.variables:
            raise PhysicsError("at_fixed_invariants in the centred dipole needs 'L' (and "
                               "'mlat') in the dataset; with only 'position_geo' pass "
                               "model='igrf' (or another field model)")
        factor = l_shell_factor(ds["L"].attrs.get("units", "1"))
        if factor is None:
            raise PhysicsError(f"'L' has units {ds['L'].attrs.get('units')!r}; use '1' or 'R_E'")
        L = (ds["L"].reset_coords(drop=True) * factor).assign_attrs(units="1")
        a_eq, e_q = dipole.invariants_to_pitch_energy(mu_da, k_da, L, species, B0_NT)
        a_eq = a_eq.isel(mu=0, drop=True).transpose("time", "k")
        e_q = e_q.transpose("time", "mu", "k")
        lst = (L * xr.ones_like(k_da)).transpose("time", "k")
        how = "L* = L (centred dipole)"
    else:
        a_s, bm_s, l_s, cadence, m = _model_nodes(ds, model, k, lstar_cadence_s, altitude_km,
                                                  n_mlt, trace_options, lstar_method)
        tcoord = {"time": ds["time"]}
        a_eq = xr.DataArray(a_s, dims=("time", "k"), coords=tcoord)
        bm = xr.DataArray(bm_s, dims=("time", "k"), coords=tcoord)
        lst = xr.DataArray(l_s, dims=("time", "k"), coords=tcoord)
        e_q = _energy_from_mu(mu_da, bm, species).transpose("time", "mu", "k")
        how = (f"beltkit.field.lstar ({getattr(m, 'name', type(m).__name__)}, {n_mlt} MLTs, "
               f"method {lstar_method!r}) "
               f"at a cadence of {cadence:g} s, interpolated linearly in time to the samples "
               "(as are alpha_eq and ln B_m)")
    # the equatorial grid: the 1-degree cells that the requested K reach somewhere (the
    # per-K range of alpha_eq over the data, computed here: one value per sample and K)
    lo_hi = xr.concat([a_eq.min("time"), a_eq.max("time")], "end").values
    grid_lo = _grid_cells(lo_hi)
    grid = np.concatenate([grid_lo, 180.0 - grid_lo[::-1]])
    eq = to_equatorial(ds, model=None if dipole_path else model, alpha_eq_deg=grid,
                       altitude_km=altitude_km)
    flux = eq["flux_equatorial"]
    err = eq["flux_equatorial_err"] if "flux_equatorial_err" in eq else xr.full_like(flux, np.nan)
    energy = np.asarray(eq["energy"].values, dtype=float)
    p2_grid = energy * (energy + 2.0 * sp.rest_energy_kev) * 1e-6
    if flux.chunks is not None:
        ch = flux.chunksizes["time"]
        e_q = e_q.chunk({"time": ch})
        a_eq = a_eq.chunk({"time": ch})
        lst = lst.chunk({"time": ch})
        err = err.chunk(flux.chunksizes)
    blc = eq["blc_equatorial"].reset_coords(drop=True)
    f, f_err, flag = xr.apply_ufunc(
        _interp_block, flux.rename(alpha_eq="_a"), err.rename(alpha_eq="_a"), e_q, a_eq, blc,
        lst,
        kwargs=dict(energy=energy, p2_grid=p2_grid, grid=grid_lo),
        input_core_dims=[["energy", "_a"], ["energy", "_a"], ["mu", "k"], ["k"], [], ["k"]],
        output_core_dims=[["mu", "k"], ["mu", "k"], ["mu", "k"]],
        dask="parallelized", output_dtypes=[float, float, np.int8],
    )
    out = xr.Dataset(
        {
            "psd": f.transpose("time", "mu", "k").assign_attrs(
                units=PSD_UNITS, long_name="phase-space density at fixed mu and K",
                ancillary_variables="psd_err psd_flag",
                comment="(c/(cm MeV))^3 in the UDUNITS grammar"),
            "psd_err": f_err.transpose("time", "mu", "k").assign_attrs(
                units=PSD_UNITS, long_name="uncertainty (1 sigma) of psd"),
            "psd_flag": flag.transpose("time", "mu", "k").assign_attrs(
                long_name="phase-space density quality flags",
                flag_masks=np.array(sorted(PSD_FLAG_MEANINGS), dtype=np.int8),
                flag_meanings=" ".join(PSD_FLAG_MEANINGS[b] for b in sorted(PSD_FLAG_MEANINGS))),
            "energy_at_invariants": e_q.assign_attrs(
                units="keV", long_name="kinetic energy with the given mu and K"),
            "alpha_eq": a_eq.assign_attrs(units="degree",
                                          long_name="equatorial pitch angle with the given K"),
            "lstar": lst.assign_attrs(units="1", long_name="Roederer L* of the drift shell"),
        },
        coords={"mu": xr.Variable("mu", mu, {"units": MU_UNITS,
                                             "long_name": "first adiabatic invariant"}),
                "k": xr.Variable("k", k, {"units": K_UNITS,
                                          "long_name": "second adiabatic invariant K"})},
    )
    out = out.assign_coords(time=eq["time"])
    out.attrs = {
        "title": "beltkit phase-space density at fixed adiabatic invariants",
        "species": sp.name,
        "beltkit_field_model": "dipole" if dipole_path else str(getattr(model, "name", model)),
        "beltkit_lstar_method": how,
        "beltkit_psd_interpolation": "ln f bilinear in (ln E, alpha_eq) on the measured "
                                     "energies and a 1-degree equatorial grid folded about 90 deg",
    }
    return out


# ---------------------------------------------------------------- passes and profiles


def passes(ds, *, variable=None, min_span=0.5):
    r"""Split an orbit into inbound and outbound passes through the belts.

    A pass runs between consecutive extrema of the radial coordinate
    (``lstar`` if present and not all NaN, else ``L``); inbound passes have
    it decreasing, outbound increasing.

    Parameters
    ----------
    ds : xarray.Dataset
        With dimension ``time`` and ``lstar`` (time[, k]) or ``L`` (time).
    variable : str, keyword-only
        Name of the radial coordinate (default: ``"lstar"`` else ``"L"``);
        for a variable with a ``k`` dimension the first K is used.
    min_span : float, keyword-only
        Passes spanning less than this in the radial coordinate are dropped
        (short wiggles near apogee or perigee).

    Returns
    -------
    xarray.Dataset
        Dimension ``pass``: ``start``, ``stop`` (times), ``direction``
        (+1 outbound, -1 inbound), ``start_index``, ``stop_index`` (into
        ``time``, stop inclusive), ``r_min``, ``r_max``.
    """
    name = variable or ("lstar" if "lstar" in ds and np.isfinite(ds["lstar"].values).any()
                        else "L")
    if name not in ds:
        raise PhysicsError(f"passes needs a radial coordinate {name!r} (lstar or L) in ds")
    r = ds[name]
    if "k" in r.dims:
        r = r.isel(k=0)
    r = np.asarray(r.values, dtype=float)
    t = ds["time"].values
    idx = np.arange(r.size)
    ok = np.isfinite(r)
    if ok.sum() < 2:
        raise PhysicsError(f"passes needs at least two finite values of {name!r}")
    ri = np.interp(idx, idx[ok], r[ok])  # bridge gaps for the direction only
    d = np.sign(np.diff(ri))
    d[d == 0] = 1
    # turning points: changes of the sign of the slope
    turns = np.flatnonzero(d[1:] != d[:-1]) + 1
    bounds = np.concatenate([[0], turns, [r.size - 1]])
    rows = []
    for a, b in zip(bounds[:-1], bounds[1:]):
        seg = r[a:b + 1]
        if not np.isfinite(seg).any():
            continue
        span = np.nanmax(seg) - np.nanmin(seg)
        if span < min_span:
            continue
        rows.append((a, b, 1 if ri[b] > ri[a] else -1, np.nanmin(seg), np.nanmax(seg)))
    if not rows:
        raise PhysicsError(f"no pass spans at least min_span={min_span} in {name!r}")
    a, b, direction, lo, hi = (np.array(c) for c in zip(*rows))
    return xr.Dataset(
        {"start": ("pass", t[a]), "stop": ("pass", t[b]),
         "direction": ("pass", direction.astype(np.int8),
                       {"long_name": "pass direction", "flag_values": np.array([-1, 1], np.int8),
                        "flag_meanings": "inbound outbound"}),
         "start_index": ("pass", a), "stop_index": ("pass", b),
         "r_min": ("pass", lo, {"units": "1", "long_name": f"smallest {name}"}),
         "r_max": ("pass", hi, {"units": "1", "long_name": f"largest {name}"})},
        coords={"pass": np.arange(a.size)},
        attrs={"radial_coordinate": name},
    )


def radial_profiles(psd_ds, mu_mev_per_g=None, k_g05_re=None, *, lstar_bins=None,
                    passes_ds=None, max_flag=0):
    r"""Phase-space density against L* per pass at fixed (mu, K).

    Each pass (:func:`passes`) is binned in L*: the value in a bin is the
    geometric mean of the pass's samples there whose flag is at most
    `max_flag` (a bitwise subset: 0 keeps unflagged samples only, 4 keeps
    those only flagged as in the loss cone, ...).

    Parameters
    ----------
    psd_ds : xarray.Dataset
        Output of :func:`at_fixed_invariants`.
    mu_mev_per_g, k_g05_re : float, optional
        The invariants of the profile (nearest of the dataset's); default the
        first of each.
    lstar_bins : array_like, keyword-only
        Bin edges in L* (default 0.1 wide over the data's range).
    passes_ds : xarray.Dataset, keyword-only
        Passes to use (default :func:`passes` of `psd_ds` at that K).
    max_flag : int, keyword-only
        Flag bits tolerated (see above).

    Returns
    -------
    xarray.Dataset
        ``psd`` (pass, lstar) with the same units, ``n_samples`` (pass,
        lstar), ``pass_time`` (pass; the mid time, for colouring by time),
        ``direction`` (pass), coordinate ``lstar`` (bin centres) with bounds.
    """
    sel = {}
    if mu_mev_per_g is not None:
        sel["mu"] = float(mu_mev_per_g)
    if k_g05_re is not None:
        sel["k"] = float(k_g05_re)
    one = psd_ds.sel(sel, method="nearest") if sel else psd_ds
    if "mu" in one.dims:
        one = one.isel(mu=0)
    if "k" in one.dims:
        one = one.isel(k=0)
    lst = np.asarray(one["lstar"].values, dtype=float)
    f = np.asarray(one["psd"].values, dtype=float)
    flag = np.asarray(one["psd_flag"].values, dtype=np.int64)
    if passes_ds is None:
        passes_ds = passes(one.drop_vars([v for v in ("mu", "k") if v in one.coords]))
    if lstar_bins is None:
        lo = np.floor(np.nanmin(lst) * 10) / 10
        hi = np.ceil(np.nanmax(lst) * 10) / 10
        lstar_bins = np.arange(lo, hi + 0.1001, 0.1)
    edges = np.asarray(lstar_bins, dtype=float)
    nb = edges.size - 1
    npass = passes_ds.sizes["pass"]
    prof = np.full((npass, nb), np.nan)
    count = np.zeros((npass, nb), dtype=np.int64)
    mid = []
    keep = ((flag & ~int(max_flag)) == 0) & np.isfinite(f) & (f > 0) & np.isfinite(lst)
    for p in range(npass):  # passes are few (a handful per day)
        a = int(passes_ds["start_index"][p])
        b = int(passes_ds["stop_index"][p])
        s = slice(a, b + 1)
        ok = keep[s]
        bi = np.digitize(lst[s][ok], edges) - 1
        inside = (bi >= 0) & (bi < nb)
        sums = np.bincount(bi[inside], weights=np.log(f[s][ok][inside]), minlength=nb)
        cnt = np.bincount(bi[inside], minlength=nb)
        with np.errstate(invalid="ignore", divide="ignore"):
            prof[p] = np.where(cnt > 0, np.exp(sums / cnt), np.nan)
        count[p] = cnt
        t = one["time"].values
        mid.append(t[a] + (t[b] - t[a]) / 2)
    centres = 0.5 * (edges[:-1] + edges[1:])
    return xr.Dataset(
        {"psd": (("pass", "lstar"), prof, {"units": psd_ds["psd"].attrs.get("units", PSD_UNITS),
                                           "long_name": "phase-space density, pass mean in "
                                                        "the L* bin (geometric)"}),
         "n_samples": (("pass", "lstar"), count, {"units": "1",
                                                 "long_name": "samples in the bin"}),
         "pass_time": ("pass", np.array(mid), {"long_name": "middle of the pass (UTC)"}),
         "direction": passes_ds["direction"].reset_coords(drop=True),
         "lstar_bnds": (("lstar", "nv"), np.stack([edges[:-1], edges[1:]], -1))},
        coords={"lstar": ("lstar", centres, {"units": "1", "long_name": "Roederer L*",
                                             "bounds": "lstar_bnds"}),
                "pass": np.arange(npass)},
        attrs={"mu_mev_per_g": float(one["mu"]) if "mu" in one.coords else np.nan,
               "k_g05_re": float(one["k"]) if "k" in one.coords else np.nan,
               "max_flag": int(max_flag)},
    )
