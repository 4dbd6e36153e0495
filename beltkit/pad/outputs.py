"""The partition outputs: their names and order, memory, long names and units."""

from __future__ import annotations

import numpy as np

from .conventions import INTEGRATED_FLUX_UNITS

__all__ = [
    "ERR_NAMES",
    "HEMI_ERR_NAMES",
    "HEMI_NAMES",
    "LONG_NAMES",
    "NAMES",
    "POPULATIONS",
    "OutputBuffers",
    "alloc_out",
    "as_3d",
    "hemisphere_row",
    "n_outputs",
    "output_names",
    "output_units",
]

#: The three populations, in the order of the output rows.
POPULATIONS = ("precipitating", "quasi_trapped", "trapped")
#: Output rows of every partition; then the uncertainties (``ERR_NAMES``) and the losses
#: per hemisphere (``HEMI_NAMES``, ``HEMI_ERR_NAMES``) when asked for.
NAMES = (
    [f"flux_{p}" for p in POPULATIONS] + ["omni_flux"]
    + [f"fraction_{p}" for p in POPULATIONS]
    + [f"coverage_{p}" for p in POPULATIONS]
    + [f"solid_angle_{p}" for p in POPULATIONS]
    + ["loss_cone_filling", "partition_flag"]
)
ERR_NAMES = [f"flux_{p}_err" for p in POPULATIONS] + ["omni_flux_err"] + [
    f"fraction_{p}_err" for p in POPULATIONS] + ["loss_cone_filling_err"]
_HEMIS = ("north", "south")
HEMI_NAMES = [f"flux_lost_{h}" for h in _HEMIS] + [f"fraction_lost_{h}" for h in _HEMIS]
HEMI_ERR_NAMES = [f"{name}_err" for name in HEMI_NAMES]


def output_names(with_err, hemispheres):
    """Names of the output rows, in the order the kernel writes them."""
    names = list(NAMES) + (list(ERR_NAMES) if with_err else [])
    if hemispheres:
        names += HEMI_NAMES + (HEMI_ERR_NAMES if with_err else [])
    return names


def n_outputs(with_err, hemispheres):
    """Return the number of output rows (see :func:`output_names`)."""
    return len(output_names(with_err, hemispheres))


def hemisphere_row(with_err, hemispheres):
    """First row of the hemisphere outputs (-1 without them)."""
    return len(NAMES) + (len(ERR_NAMES) if with_err else 0) if hemispheres else -1


#: ``long_name`` of each output.
LONG_NAMES = {
    "flux_precipitating": "precipitating flux integrated over the measured solid angle of "
                          "the bounce loss cone",
    "flux_quasi_trapped": "quasi-trapped flux integrated over the measured solid angle between "
                          "the bounce and drift loss cones",
    "flux_trapped": "trapped flux integrated over the measured solid angle outside the drift "
                    "loss cone",
    "omni_flux": "omnidirectional flux integrated over the measured solid angle",
    "fraction_precipitating": "precipitating fraction of the integrated flux",
    "fraction_quasi_trapped": "quasi-trapped fraction of the integrated flux",
    "fraction_trapped": "trapped fraction of the integrated flux",
    "coverage_precipitating": "sampled fraction of the bounce loss cone solid angle",
    "coverage_quasi_trapped": "sampled fraction of the quasi-trapped solid angle",
    "coverage_trapped": "sampled fraction of the trapped solid angle",
    "solid_angle_precipitating": "measured solid angle of the precipitating population",
    "solid_angle_quasi_trapped": "measured solid angle of the quasi-trapped population",
    "solid_angle_trapped": "measured solid angle of the trapped population",
    "loss_cone_filling": "mean directional flux inside the bounce loss cone over that in the "
                         "band just outside it",
    "flux_lost_north": "flux moving toward the northern footpoint inside its loss cone "
                       "(pitch angle below loss_cone_north), integrated over the measured "
                       "solid angle",
    "flux_lost_south": "flux moving toward the southern footpoint inside its loss cone "
                       "(pitch angle above 180 degree minus loss_cone_south), integrated over "
                       "the measured solid angle",
    "fraction_lost_north": "fraction of the integrated flux lost at the northern footpoint",
    "fraction_lost_south": "fraction of the integrated flux lost at the southern footpoint",
    "partition_flag": "partition quality flags",
}


def output_units(name):
    """Return the ``units`` of an output (without ``_err``)."""
    if name.startswith(("flux_", "omni_flux")):
        return INTEGRATED_FLUX_UNITS
    if name.startswith("solid_angle_"):
        return "sr"
    return "1"


def alloc_out(nout, n, n_e, dtype):
    """Return a (nout, stride) buffer whose rows are contiguous and padded apart.

    Rows start 64 bytes apart modulo 4096, so that writing all outputs of one
    sample does not hit the same cache set (4K aliasing) n_out times.
    """
    item = np.dtype(dtype).itemsize
    need = max(n * n_e * item, 1)
    stride_bytes = -(-need // 4096) * 4096 + 64
    return np.empty(nout * stride_bytes // item, dtype=dtype).reshape(nout, stride_bytes // item)


def as_3d(buf, n, n_e):
    """Return the first ``n * n_e`` columns of a buffer as (rows, n, n_e)."""
    return buf[:, : n * n_e].reshape(buf.shape[0], n, n_e)


class OutputBuffers:
    """Output memory reused from one eager partition to the next (one slab after another).

    A batch run partitions a file slab by slab and writes each result out
    before it computes the next: the next slab can then be written into the
    same memory, which is already mapped (no page faults, no zeroing by the
    kernel). Pass one to ``partition_slab(..., buffers=...)`` only when nothing
    keeps the previous result: its arrays are overwritten.
    """

    def __init__(self):
        self._key = None
        self._buf = self._flag = None

    def take(self, nout, n, n_e, dtype):
        """Return ``(buf, flag)`` for ``n`` samples, reusing the last ones if they fit."""
        key = (nout, n, n_e, np.dtype(dtype).str)
        if key != self._key:
            self._buf = self._flag = None  # drop the old memory before taking new
            self._buf = alloc_out(nout, n, n_e, dtype)
            self._flag = np.empty(n * n_e, dtype=np.int16)
            self._key = key
        return self._buf, self._flag
