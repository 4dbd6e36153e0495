"""The ``ds.beltkit`` accessor: beltkit's pitch-angle engine as methods of a Dataset.

Registered on :class:`xarray.Dataset` when :mod:`beltkit` is imported::

    import beltkit
    out = ds.beltkit.partition()

Registering it is cheap: the pitch-angle engine (:mod:`beltkit.pad`) is
imported when the accessor is first used. Every method forwards its keyword
arguments to the function of the same name, whose defaults apply, returns a
new object and leaves the dataset untouched.
"""

from __future__ import annotations

import xarray as xr

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
        from .pad.conventions import validate

        self._ds = ds
        self._problems = validate(ds, check_values=False)

    @property
    def problems(self):
        """Return the structural problems found when the accessor was built (list of str)."""
        return list(self._problems)

    def validate(self, **kwargs):
        """Return every problem of the dataset (see :func:`beltkit.pad.validate`).

        Parameters
        ----------
        **kwargs
            Passed to :func:`beltkit.pad.validate`.

        Returns
        -------
        list of str
            The problems; empty when the dataset follows the conventions.
        """
        from .pad.conventions import validate

        return validate(self._ds, **kwargs)

    def partition(self, **kwargs):
        """Split the flux into populations (see :func:`beltkit.pad.partition`).

        Parameters
        ----------
        **kwargs
            Passed to :func:`beltkit.pad.partition` (``model``, ``altitude_km``, ...).

        Returns
        -------
        xarray.Dataset
            The partition outputs.
        """
        from .pad.partition import partition

        return partition(self._ds, **kwargs)

    def to_equatorial(self, **kwargs):
        """Map to equatorial pitch angle (see :func:`beltkit.pad.to_equatorial`).

        Parameters
        ----------
        **kwargs
            Passed to :func:`beltkit.pad.to_equatorial` (``model``, ``alpha_eq_deg``, ...).

        Returns
        -------
        xarray.Dataset
            The mapped distribution.
        """
        from .pad.equatorial import to_equatorial

        return to_equatorial(self._ds, **kwargs)

    def fit_sine_power(self, **kwargs):
        """Fit A sin^n(alpha) to the trapped bins (see :func:`beltkit.pad.fit_sine_power`).

        Parameters
        ----------
        **kwargs
            Passed to :func:`beltkit.pad.fit_sine_power` (``model``, ...).

        Returns
        -------
        xarray.Dataset
            The fit parameters and their uncertainties.
        """
        from .pad.fit import fit_sine_power

        return fit_sine_power(self._ds, **kwargs)
