r"""Traced field lines as arrays (:class:`FieldLines`) and as an xarray Dataset.

:func:`beltkit.field.trace.trace_lines` returns a :class:`FieldLines`: per-line
footpoints, minimum of :math:`|B|`, arc lengths, open flags and the samples of
:math:`\ln|B|` along each line. :func:`lines_to_dataset` gives it the
``line`` Dataset form that :func:`beltkit.field.trace` returns (CF
attributes: units, long names, flag values), :func:`lines_from_dataset` takes
it back, and :func:`concat_lines` joins the batches of a long trace.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from ..errors import PhysicsError
from .trace_ends import OPEN_REASONS
from .trace_integral import integral_invariant_of_lines

__all__ = ["FieldLines", "concat_lines", "lines_from_dataset", "lines_to_dataset"]


@dataclass
class FieldLines:
    """Traced field lines in array form (the result of :func:`beltkit.field.trace.trace_lines`).

    Arc length ``s`` runs from the northern footpoint (``s = 0``) to the
    southern one; "north" is the end reached by following the field vector
    (the field enters the Earth in the northern magnetic hemisphere).

    Attributes
    ----------
    start : ndarray (N, 3)
        Start points, GEO km.
    b_start : ndarray (N,)
        |B| at the start points, nT.
    s_start : ndarray (N,)
        Arc length from the northern footpoint to the start point, km.
    foot_north, foot_south : ndarray (N, 3)
        Footpoints (stop-altitude crossings), GEO km.
    b_foot_north, b_foot_south : ndarray (N,)
        |B| at the footpoints, nT.
    xyz_min : ndarray (N, 3)
        Point of minimum |B| along the line, GEO km.
    b_min, s_min : ndarray (N,)
        Minimum |B| (nT) and its arc length from the northern footpoint (km).
    length : ndarray (N,)
        Total arc length between the footpoints, km.
    open : ndarray (N,) of bool
        The line escaped beyond the maximum radius, left the model's outer
        boundary (or started outside it) or ran out of steps.
    s, log_b : ndarray (N, K)
        Samples of arc length (km) and ln(|B| / nT) along each line, sorted by
        ``s``; padded at the end with the line's last value.
    n_samples : ndarray (N,)
        Number of valid samples per line.
    steps : ndarray (N,)
        Accepted integration steps (both directions).
    evaluations : int
        Field evaluations used (points).
    open_reason : ndarray (N,) of int8, optional
        Why a line is open (:data:`~beltkit.field.trace_ends.OPEN_REASONS`; the first reason met in
        the northern half, else the southern); 0 for lines not open.
    """

    start: np.ndarray
    b_start: np.ndarray
    s_start: np.ndarray
    foot_north: np.ndarray
    foot_south: np.ndarray
    b_foot_north: np.ndarray
    b_foot_south: np.ndarray
    xyz_min: np.ndarray
    b_min: np.ndarray
    s_min: np.ndarray
    length: np.ndarray
    open: np.ndarray
    s: np.ndarray
    log_b: np.ndarray
    n_samples: np.ndarray
    steps: np.ndarray
    evaluations: int
    open_reason: np.ndarray | None = None

    @property
    def closed(self):
        """Lines that reached the stop altitude at both ends (and had a finite start)."""
        return ~self.open & np.isfinite(self.length)

    def integral_invariant(self, b_m_nt):
        """Integral invariant I (km) for mirror fields `b_m_nt`.

        See :func:`beltkit.field.integral_invariant`.
        """
        return integral_invariant_of_lines(self, b_m_nt)


def lines_to_dataset(lines, altitude_km=100.0, samples=False):
    """Wrap :class:`FieldLines` into an :class:`xarray.Dataset` (dimension ``line``).

    Parameters
    ----------
    lines : FieldLines
        Result of :func:`beltkit.field.trace.trace_lines`.
    altitude_km : float
        Stop altitude used, in km above the sphere of radius R_E = 6371.2 km
        (:data:`beltkit.constants.R_E_KM`), not the ellipsoid (stored as an
        attribute).
    samples : bool
        Include the samples along each line.

    Returns
    -------
    xarray.Dataset
        See :func:`beltkit.field.trace`.
    """
    def v(data, units, long_name, dims=("line",)):
        return xr.Variable(dims, data, {"units": units, "long_name": long_name})

    xyz = ("line", "xyz")
    data = {
        "b_foot_north": v(lines.b_foot_north, "nT", "field magnitude at the northern footpoint"),
        "b_foot_south": v(lines.b_foot_south, "nT", "field magnitude at the southern footpoint"),
        "b_min": v(lines.b_min, "nT", "minimum field magnitude along the field line"),
        "b_start": v(lines.b_start, "nT", "field magnitude at the start point"),
        "xyz_foot_north": v(lines.foot_north, "km", "northern footpoint, GEO Cartesian", xyz),
        "xyz_foot_south": v(lines.foot_south, "km", "southern footpoint, GEO Cartesian", xyz),
        "xyz_min": v(lines.xyz_min, "km", "point of minimum field magnitude, GEO Cartesian", xyz),
        "xyz_start": v(lines.start, "km", "start point, GEO Cartesian", xyz),
        "length": v(lines.length, "km", "field-line arc length between the footpoints"),
        "s_min": v(lines.s_min, "km", "arc length from the northern footpoint to the minimum"),
        "s_start": v(lines.s_start, "km", "arc length from the northern footpoint to the start"),
        "open": xr.Variable(("line",), lines.open,
                            {"long_name": "line escaped, left the model's outer boundary or "
                                          "exceeded the step limit (no footpoint)"}),
        "open_reason": xr.Variable(
            ("line",), _reasons(lines),
            {"long_name": "why the field line is open",
             "flag_values": np.array(sorted(OPEN_REASONS), dtype=np.int8),
             "flag_meanings": " ".join(OPEN_REASONS[k] for k in sorted(OPEN_REASONS))}),
        "steps": xr.Variable(("line",), lines.steps, {"units": "1",
                                                     "long_name": "accepted integration steps"}),
    }
    if samples:
        pad = np.arange(lines.s.shape[1])[None, :] >= lines.n_samples[:, None]
        data["sample_s"] = v(np.where(pad, np.nan, lines.s), "km",
                             "arc length from the northern footpoint", ("line", "point"))
        data["sample_b"] = v(np.where(pad, np.nan, np.exp(lines.log_b)), "nT",
                             "field magnitude along the line", ("line", "point"))
        data["n_samples"] = xr.Variable(("line",), lines.n_samples, {"units": "1"})
    ds = xr.Dataset(data, coords={"xyz": ["x", "y", "z"]})
    ds.attrs["altitude_km"] = float(altitude_km)
    ds.attrs["frame"] = "GEO"
    return ds


def lines_from_dataset(ds):
    """Rebuild :class:`FieldLines` from the Dataset of ``trace(..., samples=True)``.

    Parameters
    ----------
    ds : xarray.Dataset
        Output of :func:`beltkit.field.trace` with ``samples=True`` (or of
        :func:`lines_to_dataset` with ``samples=True``).

    Returns
    -------
    FieldLines
        The per-line results and samples (``steps`` NaN, ``evaluations`` 0).

    Raises
    ------
    PhysicsError
        If the Dataset holds no samples.
    """
    if "sample_s" not in ds:
        raise PhysicsError(
            "argument 'lines' is a Dataset without samples; call beltkit.field.trace(..., "
            "samples=True)"
        )
    s = ds["sample_s"].values
    lb = np.log(ds["sample_b"].values)
    ns = ds["n_samples"].values.astype(np.int64)
    nan = np.full(ds.sizes["line"], np.nan)
    return FieldLines(
        start=ds["xyz_start"].values, b_start=ds["b_start"].values, s_start=ds["s_start"].values,
        foot_north=ds["xyz_foot_north"].values, foot_south=ds["xyz_foot_south"].values,
        b_foot_north=ds["b_foot_north"].values, b_foot_south=ds["b_foot_south"].values,
        xyz_min=ds["xyz_min"].values, b_min=ds["b_min"].values, s_min=ds["s_min"].values,
        length=ds["length"].values, open=ds["open"].values.astype(bool), s=s, log_b=lb,
        n_samples=ns, steps=nan, evaluations=0,
        open_reason=ds["open_reason"].values if "open_reason" in ds else None,
    )


def concat_lines(parts):
    """Concatenate the per-line results of several batches (samples dropped).

    Parameters
    ----------
    parts : list of FieldLines
        Batches in line order.

    Returns
    -------
    FieldLines
        The lines of all batches, with empty sample rows (a single batch is
        returned as it is, samples included).
    """
    if len(parts) == 1:
        return parts[0]
    fields = {}
    for name in ("start", "b_start", "s_start", "foot_north", "foot_south", "b_foot_north",
                 "b_foot_south", "xyz_min", "b_min", "s_min", "length", "open", "n_samples",
                 "steps"):
        fields[name] = np.concatenate([getattr(p, name) for p in parts])
    n = fields["b_min"].size
    fields["open_reason"] = np.concatenate([_reasons(p) for p in parts])
    return FieldLines(s=np.zeros((n, 0)), log_b=np.zeros((n, 0)),
                      evaluations=sum(p.evaluations for p in parts), **fields)


def _reasons(lines):
    """``open_reason`` of a :class:`FieldLines` (3, step limit, for open lines without one)."""
    if lines.open_reason is not None:
        return np.asarray(lines.open_reason, dtype=np.int8)
    return np.where(lines.open, 3, 0).astype(np.int8)
