"""The ``ds.beltkit`` accessor: beltkit's pitch-angle engine as methods of a Dataset.

Registered on :class:`xarray.Dataset` when :mod:`beltkit` is imported::

    import beltkit
    out = ds.beltkit.partition()

Every method returns a new object and leaves the dataset untouched.
"""

from __future__ import annotations

import xarray as xr

from .conventions import validate as _validate
from .equatorial import to_equatorial as _to_equatorial
from .fit import fit_sine_power as _fit_sine_power
from .partition import partition as _partition

__all__ = ["BeltkitAccessor"]


@xr.register_dataset_accessor("beltkit")
class BeltkitAccessor:
    """Pitch-angle analysis of a flux dataset (``ds.beltkit``).

    Parameters
    ----------
    ds : xarray.Dataset
        The flux dataset. Its structure (names, dimensions, units, bins) is
        checked when the accessor is built, and the problems found are kept in
        :attr:`problems`; the methods check again (values included) and raise
        :class:`~beltkit.errors.ConventionError` listing every problem.
    """

    def __init__(self, ds):
        if not isinstance(ds, xr.Dataset):  # pragma: no cover - xarray passes Datasets
            raise TypeError("the beltkit accessor works on xarray.Dataset objects")
        self._ds = ds
        self._problems = _validate(ds, check_values=False)

    @property
    def problems(self):
        """Return the structural problems found when the accessor was built (list of str)."""
        return list(self._problems)

    def validate(self, **kwargs):
        """Return every problem of the dataset (see :func:`beltkit.pad.validate`).

        Parameters
        ----------
        **kwargs
            ``model``, ``allow_negative``, ``check_values``.

        Returns
        -------
        list of str
            The problems; empty when the dataset follows the conventions.
        """
        return _validate(self._ds, **kwargs)

    def partition(self, model=None, altitude_km=100.0, **kwargs):
        """Split the flux into populations (see :func:`beltkit.pad.partition`).

        Parameters
        ----------
        model : None, str or FieldModel
            Field model for the loss cones.
        altitude_km : float
            Footpoint altitude (km).
        **kwargs
            ``filling_band_deg``, ``allow_negative``, ``engine``.

        Returns
        -------
        xarray.Dataset
            The partition outputs.
        """
        return _partition(self._ds, model=model, altitude_km=altitude_km, **kwargs)

    def to_equatorial(self, model=None, alpha_eq_deg=None, **kwargs):
        """Map to equatorial pitch angle (see :func:`beltkit.pad.to_equatorial`).

        Parameters
        ----------
        model : None, str or FieldModel
            Field model.
        alpha_eq_deg : array_like, optional
            Equatorial pitch-angle grid (deg).
        **kwargs
            ``altitude_km``, ``method``.

        Returns
        -------
        xarray.Dataset
            The mapped distribution.
        """
        return _to_equatorial(self._ds, model=model, alpha_eq_deg=alpha_eq_deg, **kwargs)

    def fit_sine_power(self, model=None, **kwargs):
        """Fit A sin^n(alpha) to the trapped bins (see :func:`beltkit.pad.fit_sine_power`).

        Parameters
        ----------
        model : None, str or FieldModel
            Field model for the trapped range.
        **kwargs
            ``altitude_km``, ``method``, ``max_iter``.

        Returns
        -------
        xarray.Dataset
            The fit parameters and their uncertainties.
        """
        return _fit_sine_power(self._ds, model=model, **kwargs)
