r"""From spin-sectored counts and a field vector to pitch-angle data.

:func:`bin_sectors` turns a *sectored* dataset (counts or flux per time,
energy, sector and optionally detector, with the look directions and the
magnetic field; ``docs/conventions.md`` section 9) into a dataset that follows
the pitch-angle conventions (section 1-3), ready for
:func:`beltkit.pad.partition`, ``beltkit inspect`` and ``summarize``.

Geometry (gyrotropy; the telescope geometry of :mod:`beltkit.pad.geometry`)
    Each look -- one sector of one detector at one time -- stands for the band
    of pitch angles it sweeps: the axis pitch angles :math:`\alpha(\varphi)`
    of the boresight over the accumulation (the spin phase runs from
    :math:`\varphi_0` to :math:`\varphi_1`), widened on both sides by the
    field-of-view half-angle :math:`\delta` (:func:`beltkit.pad.swept_band`),

    .. math::
        [a_{lo}, a_{hi}] = [\max(0, \min_\varphi\alpha - \delta),
        \ \min(180, \max_\varphi\alpha + \delta)],

    with the flux uniform over the band's solid angle
    :math:`\Omega_k = 2\pi(\cos a_{lo} - \cos a_{hi})`. Its weight in
    pitch-angle bin :math:`i` is the band's solid-angle fraction inside the
    bin, :math:`w_{ki} = \Omega(\text{band}_k \cap \text{bin}_i) / \Omega_k`
    (:func:`beltkit.pad.band_overlap_solid_angle`; spherical zones).

    For a boresight at polar angle :math:`\theta_d` from the spin axis
    :math:`\hat{\mathbf s}` and spin phase :math:`\varphi` (from the reference
    direction, right-handed about :math:`\hat{\mathbf s}`), with
    :math:`\hat{\mathbf b} = (b_s, \rho\cos\varphi_b, \rho\sin\varphi_b)` in
    the spin frame,

    .. math::
        \cos\alpha(\varphi) = -\hat{\mathbf l}\cdot\hat{\mathbf b}
        = -\left(\sin\theta_d\,\rho\cos(\varphi - \varphi_b)
        + \cos\theta_d\, b_s\right),

    a sinusoid in :math:`\varphi`, so its extremes over the accumulation are
    at the ends or at :math:`\varphi_b`, :math:`\varphi_b + \pi` when they lie
    inside it (vector algebra). The kernel works in :math:`\cos\alpha` (the
    widening by :math:`\delta` with the angle-sum formula), so no arc cosine
    is taken per look.

Combination (Poisson counting statistics)
    With counts :math:`N_k` and exposure :math:`G_k = 1/c_k`
    (:math:`c_k` = ``counts_to_flux``: flux per count),

    .. math::
        C_i = \sum_k w_{ki} N_k, \quad
        j_i = \frac{C_i}{\sum_k w_{ki} G_k}, \quad
        \sigma_i = \frac{\sqrt{\sum_k w_{ki}^2 N_k}}{\sum_k w_{ki} G_k}

    (first-order propagation of independent Poisson counts, variance
    :math:`N_k`, with :math:`N_k = 0` counted as 1 as in section 2 of the
    conventions). Flux input without counts uses :math:`G_k = 1`,
    :math:`N_k \to j_k` and the variance :math:`\sigma_k^2` of ``flux_err``.
    :math:`j_i` is unbiased when the flux is uniform over the bands that feed
    the bin; a band wider than the bins smooths the distribution (it is the
    looks' resolution, not hidden). Every look's counts are shared out in
    full, so :math:`\sum_i C_i = \sum_k N_k` when the bins cover 0-180 deg.

Gyrotropy statistic
    Under gyrotropy two looks that sweep the same pitch-angle band see the
    same flux, whatever their gyrophases (in a spin, the sectors at
    :math:`\varphi_b \pm \Delta` do). Looks :math:`a, b` whose bands have a
    similarity :math:`\Omega(a \cap b)^2 / (\Omega_a\Omega_b) \ge 0.8`
    (:data:`PAIR_SIMILARITY`) form a pair, and

    .. math::
        \chi^2 = \sum_{pairs} \frac{(j_a - j_b)^2}
        {\sigma_a^2 + \sigma_b^2 + (\epsilon\,\bar j_{ab})^2}

    over the :math:`m` pairs, with the looks' own flux :math:`j = N/G` and
    Poisson variances :math:`\sigma^2 = \max(N, 1)/G^2`, and an optional
    relative tolerance :math:`\epsilon` (``gyrotropy_tolerance``, default 0.1:
    paired bands are alike, not identical).
    Its reduced value :math:`\chi^2/m` is ``gyrotropy_chi2``; a sample and
    energy is flagged not gyrotropic where :math:`\chi^2` exceeds the
    chi-square quantile of :math:`m` degrees of freedom at the level
    ``gyrotropy_level`` (Wilson & Hilferty 1931 cube-root approximation of the
    quantile; pairs taken as independent). A gyrophase dependence that is
    mirror-symmetric about the plane of the spin axis and B is invisible to
    any spinning instrument and so to this test.

Layout: the dataset checks and the per-look geometry arrays are in
:mod:`beltkit.pad.sector_input`, the compiled one-pass kernel and its driver
over time blocks in ``beltkit.pad._sector_kernel``; this module assembles the
output dataset.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .._renamed import renamed_keyword
from ._sector_kernel import run_blocks
from .conventions import FLUX_UNITS
from .sector_input import look_geometry, passed_through, read_sectored

__all__ = ["PAIR_SIMILARITY", "SECTOR_FLAG_MEANINGS", "bin_sectors", "sector_bands"]

#: bits of ``sector_flag``
SECTOR_FLAG_MEANINGS = {
    1: "unsampled_bin",
    2: "not_gyrotropic",
    4: "degenerate_geometry",
    8: "no_valid_data",
    16: "partly_covered_bin",
}

#: two looks form a gyrotropy pair when their bands' similarity
#: Omega(a & b)^2 / (Omega(a) Omega(b)) is at least this
PAIR_SIMILARITY = 0.8


@renamed_keyword("field", "model")
def bin_sectors(ds, pitch_angle_edges_deg, *, model=None, gyrotropy_level=1e-3,
                gyrotropy_tolerance=0.1, degenerate_deg=10.0):
    r"""Bin a sectored dataset into pitch-angle bins (pitch-angle conventions out).

    Each look (sector x detector x time) stands for the band of pitch angles
    its field of view sweeps over a gyration, widened by the spin during its
    accumulation; its counts are shared among the bins in proportion to the
    band's solid angle in each (module docstring: geometry, combination,
    gyrotropy statistic).

    .. math::
        j_i = \frac{\sum_k w_{ki} N_k}{\sum_k w_{ki}/c_k}, \qquad
        w_{ki} = \frac{\Omega(\text{band}_k \cap \text{bin}_i)}{\Omega(\text{band}_k)},
        \qquad \Omega([a_1, a_2]) = 2\pi(\cos a_1 - \cos a_2)

    Parameters
    ----------
    ds : xarray.Dataset
        Sectored data (``docs/conventions.md`` section 9): ``counts`` with
        ``counts_to_flux`` (or ``flux`` with optional ``flux_err``) on (time,
        energy, sector[, detector]); the look directions (``look_direction``
        with a ``frame``, or the spin form); ``b_vector`` (time, 3) with a
        ``frame`` (or `model`); ``fov_half_angle``. Not modified; a file
        opened lazily is read one block of times at a time.
    pitch_angle_edges_deg : array_like
        Bin edges (degree, strictly increasing, within 0-180).
    model : FieldModel or str, optional
        Field model evaluated at ``position_geo`` (GEO km) instead of the
        dataset's ``b_vector``. ``field=`` is the deprecated former spelling
        (warns; removed in the next release).
    gyrotropy_level : float
        Significance level of the gyrotropy test (default 1e-3): a sample and
        energy whose chi-square exceeds the quantile ``1 - level`` is flagged.
    gyrotropy_tolerance : float
        Relative difference of two paired looks tolerated beyond their Poisson
        errors (default 0.1): paired bands are alike, not identical (similarity
        >= 0.8), so where the flux is steep (a loss-cone edge) two looks of a
        gyrotropic distribution differ by up to ~10 %, which finely counted
        data (1e4-1e6 counts) would otherwise flag. 0 tests the counting
        statistics alone.
    degenerate_deg : float
        Flag samples whose field lies within this angle (degree) of the spin
        axis or its opposite (spin form only): the sectors then see nearly one
        pitch angle per detector.

    Returns
    -------
    xarray.Dataset
        ``flux``, ``flux_err`` (time, energy, pitch_angle) in
        cm-2 s-1 sr-1 keV-1; ``counts`` (apportioned counts :math:`C_i`, counts
        input only); ``look_count`` (looks that fed each bin; 0 and NaN flux
        where none did); ``gyrotropy_chi2`` (reduced) and ``gyrotropy_dof``
        (time, energy); ``pitch_angle_coverage`` (time,) (solid angle of the
        union of the looks' bands over 4 pi); ``bin_coverage`` (time,
        pitch_angle) (each bin's solid-angle fraction inside that union: a bin
        below 1 is estimated from looks that see only part of it, bit 16 of
        ``sector_flag`` where one is below 0.99); ``spin_b_angle`` (time,) (spin
        form); ``sector_flag`` (bits in :data:`SECTOR_FLAG_MEANINGS`);
        ``pitch_angle_bnds``, ``energy_bnds`` and the position variables passed
        through. It passes :func:`beltkit.pad.validate`.

    Raises
    ------
    ConventionError
        Listing every problem of the dataset at once.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> t = np.array(["2027-03-08T00:00"], dtype="datetime64[ns]")
    >>> ds = xr.Dataset(
    ...     {"counts": (("time", "energy", "sector"), np.full((1, 1, 4), 100.0)),
    ...      "counts_to_flux": ((), 2.0, {"units": "cm-2 s-1 sr-1 keV-1"}),
    ...      "energy_bnds": (("energy", "nv"), [[90.0, 110.0]], {"units": "keV"}),
    ...      "spin_axis": (("time", "xyz"), [[0.0, 0.0, 1.0]], {"frame": "GSE"}),
    ...      "spin_phase_reference": (("time", "xyz"), [[1.0, 0.0, 0.0]], {"frame": "GSE"}),
    ...      "sector_phase_bnds": (("sector", "nv"), [[0, 90], [90, 180], [180, 270],
    ...                                              [270, 360]], {"units": "degree"}),
    ...      "detector_polar_angle": ((), 90.0, {"units": "degree"}),
    ...      "fov_half_angle": ((), 10.0, {"units": "degree"}),
    ...      "b_vector": (("time", "xyz"), [[100.0, 0.0, 0.0]], {"frame": "GSE",
    ...                                                          "units": "nT"})},
    ...     coords={"time": t, "energy": ("energy", [100.0], {"units": "keV"})})
    >>> out = bin_sectors(ds, np.linspace(0, 180, 7))
    >>> out["flux"].values[0, 0].tolist()  # isotropic counts: every bin 200
    [200.0, 200.0, 200.0, 200.0, 200.0, 200.0]
    """
    s = read_sectored(ds, pitch_angle_edges_deg, model)
    geo = look_geometry(s)
    z = float(_normal_isf(gyrotropy_level))
    flux, err, cnt, nlook, chi, dof, flag, cover, bcov = run_blocks(
        s, ds, geo, s.edges, z, float(gyrotropy_tolerance), PAIR_SIMILARITY)
    psi = geo[-1]
    if psi is not None:
        psi_eff = np.minimum(psi, 180.0 - psi)
        degenerate = psi_eff < degenerate_deg
        flag |= np.where(degenerate, np.uint8(4), np.uint8(0))[:, None]
    edges = s.edges
    centres = 0.5 * (edges[:-1] + edges[1:])
    dims3 = ("time", "energy", "pitch_angle")
    has_err = s.is_counts or s.err is not None
    data = {
        "flux": (dims3, flux, {"units": FLUX_UNITS,
                               "long_name": "differential directional flux binned from "
                                            "spin sectors",
                               **({"ancillary_variables": "flux_err"} if has_err else {})}),
        "look_count": (dims3, nlook, {"units": "1",
                                      "long_name": "number of sector looks that fed the bin "
                                                   "(0: unsampled, flux NaN)"}),
        "gyrotropy_chi2": (("time", "energy"), chi,
                           {"units": "1", "long_name": "reduced chi-square of the flux "
                                                       "differences of looks sweeping the "
                                                       "same pitch-angle band"}),
        "gyrotropy_dof": (("time", "energy"), dof,
                          {"units": "1", "long_name": "number of look pairs with the same "
                                                      "pitch-angle band (degrees of freedom "
                                                      "of gyrotropy_chi2)"}),
        "bin_coverage": (("time", "pitch_angle"), bcov,
                         {"units": "1", "long_name": "solid-angle fraction of the bin inside "
                                                     "the union of the looks' bands"}),
        "pitch_angle_coverage": ("time", cover.astype(np.float32),
                                 {"units": "1", "long_name": "solid angle of the union of the "
                                                             "looks' pitch-angle bands over "
                                                             "4 pi"}),
        "sector_flag": (("time", "energy"), flag,
                        {"long_name": "sector binning quality flags",
                         "flag_masks": np.array(list(SECTOR_FLAG_MEANINGS), np.uint8),
                         "flag_meanings": " ".join(SECTOR_FLAG_MEANINGS.values()),
                         "gyrotropy_level": float(gyrotropy_level),
                         "gyrotropy_tolerance": float(gyrotropy_tolerance),
                         "degenerate_deg": float(degenerate_deg)}),
        "pitch_angle_bnds": (("pitch_angle", "nv"), np.stack([edges[:-1], edges[1:]], -1),
                             {"units": "degree"}),
    }
    if has_err:
        data["flux_err"] = (dims3, err, {"units": FLUX_UNITS,
                                         "long_name": "flux uncertainty (1 sigma, Poisson "
                                                      "counts propagated)"})
    if s.is_counts:
        data["counts"] = (dims3, cnt, {"units": "1",
                                       "long_name": "counts apportioned to the bin (sum over "
                                                    "looks of solid-angle weight x counts)"})
    if psi is not None:
        data["spin_b_angle"] = ("time", psi.astype(np.float32),
                                {"units": "degree",
                                 "long_name": "angle between the spin axis and the field"})
    passed = {k: v for k, v in passed_through(ds, s).items() if k not in data}
    out = xr.Dataset(data, coords={
        "time": ds["time"],
        "energy": ds["energy"],
        "pitch_angle": ("pitch_angle", centres, {"units": "degree",
                                                 "long_name": "local pitch angle",
                                                 "bounds": "pitch_angle_bnds"}),
    })
    out = out.assign(passed)
    out.attrs = {**ds.attrs}
    out.attrs["beltkit_sectors"] = (
        f"binned from {s.n_s} sectors x {s.n_d} detector(s) by beltkit.pad.bin_sectors "
        f"({'spin form' if s.mode == 1 else 'look directions'}; field "
        f"{'model ' + str(model) if model is not None else 'b_vector'})")
    out.attrs.setdefault("Conventions", "CF-1.8")
    return out


def _normal_isf(level):
    """Upper-tail standard normal quantile (scipy.special.ndtri)."""
    from scipy.special import ndtri

    level = float(level)
    if not 0.0 < level < 1.0:
        raise ValueError(f"gyrotropy_level must lie in (0, 1), got {level}")
    return -ndtri(level)


@renamed_keyword("field", "model")
def sector_bands(ds, *, model=None):
    r"""Pitch-angle band (deg) each look of a sectored dataset sweeps.

    The band :math:`[\max(0, \min_\varphi\alpha - \delta), \min(180,
    \max_\varphi\alpha + \delta)]` of :func:`bin_sectors`, from the same
    compiled geometry.

    Parameters
    ----------
    ds : xarray.Dataset
        Sectored dataset (``docs/conventions.md`` section 9); its counts are
        not read.
    model : FieldModel or str, optional
        As for :func:`bin_sectors` (``field=`` is its deprecated spelling).

    Returns
    -------
    xarray.Dataset
        ``band_lower``, ``band_upper`` (time, sector[, detector]) in degree.
    """
    s = read_sectored(ds, [0.0, 180.0], model)
    geo = look_geometry(s)
    bands = np.zeros((s.n_t, s.n_k, 2))
    run_blocks(s, ds, geo, s.edges, 0.0, 0.0, PAIR_SIMILARITY, n_e=0, bands=bands)
    with np.errstate(invalid="ignore"):
        deg = np.degrees(np.arccos(np.clip(bands, -1.0, 1.0))).reshape(
            s.n_t, s.n_s, s.n_d, 2)
    dims = ("time", "sector", "detector")
    out = xr.Dataset({
        "band_lower": (dims, deg[..., 0], {"units": "degree",
                                           "long_name": "lower edge of the look's swept "
                                                        "pitch-angle band"}),
        "band_upper": (dims, deg[..., 1], {"units": "degree",
                                           "long_name": "upper edge of the look's swept "
                                                        "pitch-angle band"})},
        coords={"time": ds["time"]})
    return out if s.has_det else out.isel(detector=0, drop=True)
