r"""Field-line tracing, the public entry points: :func:`trace`, :func:`trace_lines` and their I.

Many field lines are followed at once: every array operation acts on all the
lines that are still being integrated, and only the loop over integration
steps is a Python loop. Each line is followed from its start point in both
directions until it crosses the stop altitude (the crossing is refined by a
secant search on the length of the last step, so footpoints carry the full
accuracy of the integrator), or until it escapes beyond a maximum radius, leaves the model's outer
boundary (a model with an ``inside(xyz_km, time)`` method, such as
:class:`beltkit.field.T89`, whose validity ends at a magnetopause), or
exceeds a maximum number of steps (then it is flagged ``open``, with the
reason in ``open_reason``; it never gets a footpoint, and tracing never
hangs).

This module checks the arguments, splits long traces into batches of
:data:`BLOCK_LINES` lines and puts the parts together; the parts live in
their own modules:

- :mod:`~beltkit.field.trace_step`: one Dormand-Prince 5(4) step of
  :math:`d\mathbf{x}/ds = \pm \mathbf{B}/|\mathbf{B}|` (Dormand & Prince
  1980, J. Comput. Appl. Math. 6, 19);
- :mod:`~beltkit.field.trace_ends`: the step-size control (Hairer, Norsett &
  Wanner, *Solving Ordinary Differential Equations I*, 2nd ed., 1993,
  sect. II.4) and where a line ends (footpoints, escape, outer boundary,
  step limit: :data:`OPEN_REASONS`);
- :mod:`~beltkit.field.trace_samples`: the samples of :math:`\ln|B|` versus
  arc length and the refined minimum of :math:`|B|` (the line's magnetic
  equator);
- :mod:`~beltkit.field.trace_integral`: the integral invariant
  :math:`I = \int \sqrt{1 - B/B_m}\,ds` between the mirror points, for any
  mirror field (see :func:`integral_invariant`);
- :mod:`~beltkit.field.fieldlines`: the result (:class:`FieldLines`) and its
  Dataset form.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..constants import R_E_KM
from ..errors import PhysicsError
from .fieldlines import FieldLines, concat_lines, lines_from_dataset, lines_to_dataset
from .points import start_points
from .trace_ends import OPEN_REASONS, split_halves, trace_halves
from .trace_integral import FOOT_TOLERANCE, integral_invariant_of_lines
from .trace_samples import assemble_samples, insert_minimum, pad_samples, refine_minimum
from .trace_step import LineField

# FieldLines, OPEN_REASONS and FOOT_TOLERANCE live in their own modules; they stay
# importable from here, where they were first published.
__all__ = ["BLOCK_LINES", "FOOT_TOLERANCE", "OPEN_REASONS", "FieldLines", "blocks",
           "integral_invariant", "time_block", "trace", "trace_lines"]

#: Lines traced together in one batch by the high-level functions (bounds memory:
#: the samples of a batch take about 5 * 8 * 150 bytes per line).
BLOCK_LINES = 20_000


def blocks(n, size=None):
    """Yield slices that split ``range(n)`` into batches of at most `size` lines."""
    size = BLOCK_LINES if size is None else int(size)
    for i in range(0, n, size):
        yield slice(i, min(n, i + size))


def time_block(t, sl):
    """Return the times of the lines in slice `sl` (a scalar time is shared)."""
    return t[sl] if np.ndim(t) else t


def _check_time_shape(time, n):
    """Return the time argument as a scalar or a flat array of length `n`."""
    t = np.asarray(time)
    if t.ndim == 0:
        return t[()], False
    if t.size == 1:
        return t.reshape(-1)[0], False
    if t.size != n:
        raise PhysicsError(
            f"argument 'time' has {t.size} elements but there are {n} start points; "
            "give one time, or one time per start point (broadcastable to the leading "
            "dimensions of the positions)"
        )
    return t.reshape(-1), True


def trace_lines(
    model,
    start_xyz_km,
    time,
    altitude_km=100.0,
    *,
    rtol=1e-8,
    max_step_frac=0.1,
    max_radius_re=30.0,
    max_steps=3000,
    arg_name="start_xyz_km",
    b_stop_nt=None,
):
    """Trace field lines through start points; return the arrays (:class:`FieldLines`).

    This is the array-level engine behind :func:`trace`; it also keeps the
    samples of |B| along each line needed by :func:`integral_invariant`.
    Parameters are those of :func:`trace`; `arg_name` names the positions
    argument in error messages. With `b_stop_nt` (nT, scalar or one per
    line) each direction ends at its second consecutive sample where |B|
    rises above that field, beyond the mirror point of ``B_m <= b_stop_nt``
    (the minimum of the line is always passed first): :math:`I(B_m)` is
    then as on the full line, but such an end has no footpoint
    (``foot_*`` NaN; ``b_foot_*`` is |B| at the last sample, ``length``
    the arc between the last samples). Ends that reach the stop altitude
    first are footpoints as usual.

    Returns
    -------
    FieldLines
        Per-line results and samples (leading dimensions flattened).
    """
    altitude_km = float(altitude_km)
    if not np.isfinite(altitude_km) or altitude_km < 0:
        raise PhysicsError(
            f"argument 'altitude_km' must be a finite altitude >= 0 km, got {altitude_km}"
        )
    if not (0 < rtol < 1e-3):
        raise PhysicsError(f"argument 'rtol' must lie in (0, 1e-3), got {rtol}")
    if not (0 < max_step_frac <= 0.5):
        raise PhysicsError(f"argument 'max_step_frac' must lie in (0, 0.5], got {max_step_frac}")
    r_stop = R_E_KM + altitude_km
    r_max = float(max_radius_re) * R_E_KM
    if not r_max > r_stop:
        raise PhysicsError(
            f"argument 'max_radius_re' ({max_radius_re}) must exceed the stop radius "
            f"({r_stop / R_E_KM:.4f} R_E)"
        )
    x0, _ = start_points(start_xyz_km, r_stop, arg_name)
    n = x0.shape[0]
    t, per_line = _check_time_shape(time, n)
    field = LineField(model, t, per_line, n)
    finite = np.all(np.isfinite(x0), axis=1)
    unit0 = np.full((n, 3), np.nan)
    b0 = np.full(n, np.nan)
    if np.any(finite):
        fi = np.flatnonzero(finite)
        u, b = field(x0[fi], fi)
        unit0[fi] = u
        b0[fi] = b
    # start points outside the model's outer boundary are open at once (not traced)
    start_out = np.zeros(n, dtype=bool)
    if field.inside_fn is not None and np.any(finite):
        start_out[fi] = ~field.inside(x0[fi], fi)
    b_trace = np.where(start_out, np.nan, b0)
    # depth below the stop radius that a trial step may reach (the crossing is then refined)
    # (the field models refuse points more than ~10 km inside the WGS-84 surface)
    slack = max(min(0.5 * altitude_km, 50.0), 1.0)
    common = dict(r_stop=r_stop, r_max=r_max, rtol=rtol, max_step_frac=max_step_frac,
                  max_steps=max_steps, slack=slack)
    sign = np.concatenate([np.ones(n), -np.ones(n)])
    if b_stop_nt is not None:
        bs = np.broadcast_to(np.asarray(b_stop_nt, dtype=float), (n,))
        common["b_stop"] = np.concatenate([bs, bs])
    both = trace_halves(field, np.concatenate([x0, x0]), np.concatenate([unit0, unit0]),
                        np.concatenate([b_trace, b_trace]), sign, **common)
    north, south = split_halves(both, n)
    for half in (north, south):
        half.open[start_out] = True
        half.reason[start_out] = 2

    s, lb, xs, n_samples, len_n = assemble_samples(north, south, n, x0, b0)
    is_open = north.open | south.open
    open_reason = np.where(north.reason > 0, north.reason, south.reason).astype(np.int8)
    closed = ~is_open & np.isfinite(north.length) & np.isfinite(south.length)
    b_min, s_min, x_min = refine_minimum(field, s, lb, xs, n_samples, closed & (n_samples >= 3))
    s, lb, n_samples = insert_minimum(s, lb, n_samples, s_min, b_min, closed)
    # pad each row with its last valid value (for row-wise searchsorted)
    s, lb = pad_samples(s, lb, n_samples)
    length = np.where(closed, north.length + south.length, np.nan)
    s_start = np.where(closed, len_n, np.nan)
    nan3 = np.full(3, np.nan)
    return FieldLines(
        start=x0,
        b_start=b0,
        s_start=s_start,
        foot_north=np.where(np.isfinite(north.b_foot)[:, None], north.foot, nan3),
        foot_south=np.where(np.isfinite(south.b_foot)[:, None], south.foot, nan3),
        b_foot_north=north.b_foot,
        b_foot_south=south.b_foot,
        xyz_min=np.where(closed[:, None], x_min, nan3),
        b_min=np.where(closed, b_min, np.nan),
        s_min=np.where(closed, s_min, np.nan),
        length=length,
        open=is_open,
        s=s,
        log_b=lb,
        n_samples=n_samples,
        steps=north.steps + south.steps,
        evaluations=field.evaluations,
        open_reason=open_reason,
    )


def integral_invariant(lines, b_m_nt):
    r"""Integral invariant :math:`I` between the mirror points of mirror field :math:`B_m`.

    Parameters
    ----------
    lines : FieldLines or xarray.Dataset
        Output of :func:`trace_lines`, or of :func:`trace` called with
        ``samples=True``.
    b_m_nt : array_like
        Mirror field(s) in nT, shape ``(N,)`` (one per line) or ``(N, M)``.

    Returns
    -------
    numpy.ndarray
        :math:`I` in km, same shape as ``b_m_nt``; 0 for :math:`B_m = B_{min}`,
        NaN for open lines, for :math:`B_m < B_{min}` and for mirror points
        below the stop altitude (:math:`B_m` above a footpoint field).

    Notes
    -----
    .. math::

        I = \int_{s_1}^{s_2} \sqrt{1 - B(s)/B_m}\,ds

    (Roederer 1970, *Dynamics of Geomagnetically Trapped Radiation*, ch. 3;
    McIlwain 1961, J. Geophys. Res. 66, 3681). The mirror points
    :math:`s_{1,2}` nearest the field minimum are found as roots of a local
    cubic interpolant of :math:`\ln B(s)` through the samples. With
    :math:`s = c + d \sin\theta` the square-root behaviour at both mirror
    points becomes a smooth integrand in :math:`\theta`, which is integrated
    by 64-point Gauss-Legendre quadrature on the same interpolant.
    """
    if isinstance(lines, xr.Dataset):
        lines = lines_from_dataset(lines)
    return integral_invariant_of_lines(lines, b_m_nt)



def trace(
    model,
    start_xyz_km,
    time,
    altitude_km=100.0,
    *,
    rtol=1e-8,
    max_step_frac=0.1,
    max_radius_re=30.0,
    max_steps=3000,
    samples=False,
):
    r"""Trace field lines through many start points to both footpoints.

    Parameters
    ----------
    model : FieldModel
        Any object with ``field_geo(xyz_km, time)`` returning the GEO
        Cartesian field in nT (trailing axis 3), e.g.
        :class:`beltkit.field.IGRF` or :class:`beltkit.field.CenteredDipole`.
    start_xyz_km : array_like, shape (..., 3)
        Start points, GEO Cartesian km. Leading dimensions are flattened into
        the ``line`` dimension (row-major order). NaN rows give NaN results.
    time : numpy.datetime64 or array_like
        One time, or one per start point (UTC).
    altitude_km : float, default 100
        Stop altitude above the reference sphere :math:`R_E` = 6371.2 km (not the
        WGS-84 ellipsoid).
    rtol : float, default 1e-8
        Local error tolerance per step, relative to the geocentric distance.
    max_step_frac : float, default 0.1
        Largest step as a fraction of the geocentric distance (also keeps the
        samples of :math:`|B|` dense enough for the integral invariant).
    max_radius_re : float, default 30
        A line reaching beyond this radius (R_E) is flagged open. A model
        with an outer boundary (``model.inside(xyz_km, time)``, e.g.
        :class:`beltkit.field.T89`) also stops lines that leave it, or start
        outside it: they are open, never given a footpoint.
    max_steps : int, default 3000
        A line needing more steps in one direction is flagged open.
    samples : bool, default False
        Also return the samples of arc length and :math:`|B|` along each line
        (dimension ``point``), for :func:`integral_invariant`.

    Returns
    -------
    xarray.Dataset
        Dimension ``line`` (and ``xyz``): ``b_foot_north``, ``b_foot_south``,
        ``b_min``, ``b_start`` (nT); ``xyz_foot_north``, ``xyz_foot_south``,
        ``xyz_min``, ``xyz_start`` (GEO km); ``length``, ``s_min``,
        ``s_start`` (km, arc length from the northern footpoint); ``open``
        (bool); ``open_reason`` (:data:`OPEN_REASONS`: 1 beyond
        ``max_radius_re``, 2 outside the model's boundary, 3 step limit);
        ``steps``. NaN for open lines (``open`` True) and NaN start
        points (``open`` False).

    Raises
    ------
    FieldModelError
        If a start point lies inside the Earth or below the stop altitude.
    PhysicsError
        If the arguments have the wrong shape or values.

    Notes
    -----
    Integrates :math:`d\mathbf{x}/ds = \pm\mathbf{B}/B` with the Dormand &
    Prince (1980) 5(4) pair and per-line step control (Hairer, Norsett &
    Wanner 1993); stop-altitude crossings are refined by regula falsi on the
    last step's length and the minimum of :math:`B` by successive parabolic
    interpolation with exact Runge-Kutta steps. "North" is the end reached
    along :math:`\mathbf{B}` (the field points into the Earth in the northern
    magnetic hemisphere).

    Examples
    --------
    >>> import numpy as np
    >>> from beltkit.field import CenteredDipole, trace
    >>> ds = trace(CenteredDipole(epoch=2020.0), [[3 * 6371.2, 0.0, 0.0]],
    ...            np.datetime64("2020-01-01"))
    >>> bool(ds.open[0])
    False
    """
    opts = dict(rtol=rtol, max_step_frac=max_step_frac, max_radius_re=max_radius_re,
                max_steps=max_steps)
    if samples:
        lines = trace_lines(model, start_xyz_km, time, altitude_km, **opts)
        return lines_to_dataset(lines, altitude_km, samples=True)
    x, _ = start_points(start_xyz_km, R_E_KM + float(altitude_km))
    t, _ = _check_time_shape(time, x.shape[0])
    parts = [trace_lines(model, x[sl], time_block(t, sl), altitude_km, **opts)
             for sl in blocks(x.shape[0])]
    return lines_to_dataset(concat_lines(parts), altitude_km, samples=False)

