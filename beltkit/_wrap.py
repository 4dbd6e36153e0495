"""The public boundary: DataArrays in and out, argument checks, unit handling.

Every public physics function in beltkit is a plain numpy kernel wrapped by
:func:`array_api`. The wrapper

* lets scalars, numpy arrays and :class:`xarray.DataArray` be mixed freely
  (numpy broadcasting; DataArrays are aligned and broadcast by name),
* checks the ``units`` attribute of DataArray arguments against the unit the
  argument name promises, converting the few unambiguous cases (MeV to keV,
  T to nT, rad to deg) and refusing anything else with a message that says
  how to fix the call,
* runs the kernel on numpy blocks (dask-backed DataArrays stay lazy), and
* returns a float for all-scalar input, an ndarray for array input, and a
  DataArray with ``units`` and ``long_name`` set for DataArray input.

The check helpers (:func:`check_range`, :func:`as_float_array`) ignore NaN:
NaN propagates as NaN and never raises.
"""

from __future__ import annotations

import functools
import inspect
from collections.abc import Callable

import numpy as np

from .errors import PhysicsError
from .units import FLUX_UNITS, conversion_factor, l_shell_factor

__all__ = ["array_api", "as_float_array", "check_range", "to_output"]


def _unit_of_argument(name: str) -> str | None:
    """Return the unit that an argument name promises, or None."""
    if name.endswith("_kev"):
        return "keV"
    if name.endswith("_nt"):
        return "nT"
    if name.endswith("_deg"):
        return "degree"
    if name.endswith("_km"):
        return "km"
    if name == "L":
        return "1"
    if name == "flux":
        return FLUX_UNITS
    return None


def _convert_dataarray(name, value):
    """Return the numpy-compatible data of DataArray `value`, in the unit `name` promises."""
    want = _unit_of_argument(name)
    have = value.attrs.get("units")
    if want is None or have is None:
        return value
    factor = l_shell_factor(have) if want == "1" else conversion_factor(have, want)
    if factor is None:
        raise PhysicsError(
            f"argument {name!r} must be in {want!r}, but its DataArray has units {have!r}; "
            f"convert it first (for example `{name}=da * factor` with "
            f"`da.attrs['units'] = {want!r}`)"
        )
    if factor == 1.0:
        return value
    out = value * factor
    out.attrs = {**value.attrs, "units": want}
    return out


def as_float_array(value, name: str) -> np.ndarray:
    """Convert `value` to a float64 ndarray, with an error naming the argument.

    Parameters
    ----------
    value : array_like
        Scalar or array.
    name : str
        Argument name, for the error message.

    Returns
    -------
    numpy.ndarray
        ``value`` as float64 (a view where possible; never modified in place).
    """
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise PhysicsError(f"argument {name!r} must be numeric, got {value!r}") from exc
    return arr


def check_range(
    value,
    name: str,
    *,
    lo: float | None = None,
    hi: float | None = None,
    lo_open: bool = False,
    hi_open: bool = False,
    hint: str = "",
) -> np.ndarray:
    """Check that every non-NaN element of `value` lies in a range.

    Parameters
    ----------
    value : array_like
        The values to check.
    name : str
        Argument name used in the message.
    lo, hi : float, optional
        Bounds; None means unbounded.
    lo_open, hi_open : bool
        Whether the bound itself is excluded.
    hint : str
        Extra sentence appended to the message.

    Returns
    -------
    numpy.ndarray
        ``value`` as a float64 array.

    Raises
    ------
    PhysicsError
        If any non-NaN element is out of range; the message names the argument,
        the allowed range and the worst offending value.
    """
    arr = as_float_array(value, name)
    # comparisons with NaN are False: NaN never counts as out of range, and no
    # NaN-free copy of the values is needed (two comparison passes in all)
    flat = arr.ravel()
    bad = None
    if lo is not None:
        bad = (flat <= lo) if lo_open else (flat < lo)
    if hi is not None:
        above = (flat >= hi) if hi_open else (flat > hi)
        bad = above if bad is None else np.logical_or(bad, above, out=bad)
    if bad is not None and bad.any():
        worst = flat[bad][0]
        left = "(" if lo_open else "["
        right = ")" if hi_open else "]"
        lo_s = "-inf" if lo is None else f"{lo:g}"
        hi_s = "inf" if hi is None else f"{hi:g}"
        rng = f"{left}{lo_s}, {hi_s}{right}"
        msg = f"argument {name!r} must lie in {rng}; got {worst:g}"
        if np.sum(bad) > 1:
            msg += f" (and {int(np.sum(bad)) - 1} more out-of-range values)"
        if hint:
            msg += f". {hint}"
        raise PhysicsError(msg)
    return arr


def to_output(result):
    """Return a Python float for a 0-d result, the array otherwise."""
    if isinstance(result, tuple):
        return tuple(to_output(r) for r in result)
    if isinstance(result, np.ndarray) and result.ndim == 0:
        return float(result)
    if isinstance(result, np.generic):
        return float(result)
    return result


def array_api(units: str | tuple[str, ...], long_name: str | tuple[str, ...] | None = None,
              name: str | tuple[str, ...] | None = None) -> Callable:
    """Decorate a numpy kernel so that it accepts and returns DataArrays.

    Parameters
    ----------
    units : str or tuple of str
        UDUNITS unit string of the output (one per output for tuple results).
    long_name : str or tuple of str, optional
        CF ``long_name`` of the output(s).
    name : str or tuple of str, optional
        Name given to the output DataArray(s).

    Returns
    -------
    callable
        The decorator.

    Notes
    -----
    The kernel must be elementwise in its array arguments (it may broadcast
    them). Keyword arguments that are not DataArrays (species names, method
    switches, scalars) are passed through unchanged.
    """
    multi = isinstance(units, tuple)

    def decorate(func):
        sig = inspect.signature(func)

        @functools.wraps(func)
        def wrapper(*args, **kwargs):
            import xarray as xr

            bound = sig.bind(*args, **kwargs)
            bound.apply_defaults()
            arguments = dict(bound.arguments)
            da_names = [k for k, v in arguments.items() if isinstance(v, xr.DataArray)]
            if not da_names:
                return to_output(func(**arguments))
            das = [_convert_dataarray(k, arguments[k]) for k in da_names]

            def core(*values):
                call = dict(arguments)
                call.update(zip(da_names, values))
                out = func(**call)
                shape = np.broadcast_shapes(*(np.shape(v) for v in values))
                if multi:
                    return tuple(np.broadcast_to(np.asarray(o, dtype=float), shape)
                                 for o in out)
                return np.broadcast_to(np.asarray(out, dtype=float), shape)

            nout = len(units) if multi else 1
            out = xr.apply_ufunc(
                core,
                *das,
                dask="parallelized",
                output_dtypes=[float] * nout,
                output_core_dims=[()] * nout,
                keep_attrs=False,
            )
            outs = out if multi else (out,)
            unit_t = units if multi else (units,)
            ln_t = long_name if isinstance(long_name, tuple) else (long_name,) * nout
            nm_t = name if isinstance(name, tuple) else (name,) * nout
            for o, u, ln, nm in zip(outs, unit_t, ln_t, nm_t):
                o.attrs = {"units": u}
                if ln:
                    o.attrs["long_name"] = ln
                if nm:
                    o.name = nm
            return outs if multi else outs[0]

        return wrapper

    return decorate
