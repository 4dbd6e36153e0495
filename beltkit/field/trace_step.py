r"""One Dormand-Prince 5(4) step of the field-line equation, for many lines at once.

The field-line equation :math:`d\mathbf{x}/ds = \pm \mathbf{B}/|\mathbf{B}|`
(arc length :math:`s`, km) is advanced by the explicit embedded Runge-Kutta
pair of Dormand & Prince (1980, J. Comput. Appl. Math. 6, 19): a fifth-order
solution with a fourth-order error estimate, first-same-as-last (the unit
field at the new point is the next step's first stage). Every array
operation acts on all lines of the call; each line has its own step length
and direction. :class:`LineField` gives the stages the unit field and
:math:`|B|` of a model, and says whether points lie inside the model's
outer boundary.
"""

from __future__ import annotations

import numpy as np

__all__ = ["LineField", "dopri_step"]

# Dormand-Prince 5(4) tableau (Dormand & Prince 1980; Hairer et al. 1993, table 5.2).
_A = (
    (),
    (1 / 5,),
    (3 / 40, 9 / 40),
    (44 / 45, -56 / 15, 32 / 9),
    (19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729),
    (9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656),
    (35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84),
)
# difference between the 5th- and 4th-order weights (error estimate), 7 stages
_E = (71 / 57600, 0.0, -71 / 16695, 71 / 1920, -17253 / 339200, 22 / 525, -1 / 40)


class LineField:
    r"""Unit tangent :math:`\mathbf{B}/B` and magnitude :math:`B` of a model, for subsets of lines.

    Parameters
    ----------
    model : FieldModel
        Any object with ``field_geo(xyz_km, time)`` (GEO Cartesian field in
        nT); an optional ``inside(xyz_km, time)`` method marks the model's
        outer boundary (e.g. :class:`beltkit.field.T89`).
    time : numpy.datetime64 or numpy.ndarray
        One time for all lines, or one per line (`per_line`).
    per_line : bool
        Whether `time` holds one time per line.
    n_lines : int
        Number of lines. Indices passed to the methods may address
        half-lines: ``line + n_lines`` is the southward half of ``line``.

    Attributes
    ----------
    evaluations : int
        Field evaluations so far (points).
    inside_fn : callable or None
        The model's ``inside`` method (None: the model is valid everywhere).
    """

    def __init__(self, model, time, per_line, n_lines):
        self.model = model
        self.time = time
        self.per_line = per_line
        self.n_lines = max(int(n_lines), 1)
        self.evaluations = 0
        # optional outer boundary of the model (None: the model is valid everywhere)
        self.inside_fn = getattr(model, "inside", None)

    def inside(self, x, idx):
        """Return True where points lie inside the model's boundary (all True without one).

        Parameters
        ----------
        x : numpy.ndarray, shape (M, 3)
            GEO Cartesian positions, km.
        idx : numpy.ndarray of int, shape (M,)
            Line (or half-line) of each position, for its time.

        Returns
        -------
        numpy.ndarray of bool, shape (M,)
        """
        if self.inside_fn is None:
            return np.ones(x.shape[0], dtype=bool)
        t = self.time[idx % self.n_lines] if self.per_line else self.time
        return np.asarray(self.inside_fn(x, t), dtype=bool).reshape(x.shape[0])

    def __call__(self, x, idx):
        """Return the unit field vectors (M, 3) and :math:`|B|` (M,, nT) at positions `x`."""
        # indices may address half-lines (line + n_lines for the southward half)
        t = self.time[idx % self.n_lines] if self.per_line else self.time
        b = np.asarray(self.model.field_geo(x, t), dtype=float)
        self.evaluations += x.shape[0]
        bmag = np.sqrt(np.einsum("...i,...i->...", b, b))
        with np.errstate(invalid="ignore", divide="ignore"):
            unit = b / bmag[:, None]
        return unit, bmag


def dopri_step(field, x, k1, h, sign, idx):
    r"""One Dormand-Prince 5(4) step of length `h` (per line) from `x`.

    Parameters
    ----------
    field : LineField
        The unit field of the model.
    x : numpy.ndarray, shape (M, 3)
        Positions, GEO km.
    k1 : numpy.ndarray, shape (M, 3)
        Unit field vector at `x` (the first stage).
    h : numpy.ndarray, shape (M,)
        Step lengths, km (> 0).
    sign : float or numpy.ndarray
        +1 along :math:`\mathbf{B}`, -1 against (scalar or one per line).
    idx : numpy.ndarray of int, shape (M,)
        Line (or half-line) of each position, for its time.

    Returns
    -------
    tuple of numpy.ndarray
        ``(x_new, err, k_new, b_new)``: the fifth-order position, the
        error-estimate vector (fifth minus fourth order), and the unit field
        vector and :math:`|B|` at the new point (first-same-as-last: they
        serve as the next step's first stage).

    Notes
    -----
    With stages :math:`\mathbf{k}_i = \hat{\mathbf{b}}(\mathbf{x} + \sigma h
    \sum_{j<i} a_{ij}\mathbf{k}_j)`, the new point is :math:`\mathbf{x} +
    \sigma h \sum_i b_i \mathbf{k}_i` (the seventh stage's argument) and the
    error :math:`\sigma h \sum_i e_i \mathbf{k}_i` (Dormand & Prince 1980;
    Hairer, Norsett & Wanner 1993, *Solving Ordinary Differential Equations
    I*, 2nd ed., sect. II.5, table 5.2).
    """
    hs = (h * sign)[:, None]
    ks = [k1]
    for i in range(1, 7):
        xi = x.copy()
        for a, k in zip(_A[i], ks):
            if a != 0.0:
                xi += hs * a * k
        if i == 6:
            x_new = xi
        unit, bmag = field(xi, idx)
        ks.append(unit)
    err = np.zeros_like(x)
    for e, k in zip(_E, ks):
        if e != 0.0:
            err += hs * e * k
    return x_new, err, ks[6], bmag
