"""The field-model comparison figure (beltkit.plot.field_model_comparison), headless.

The runs are small synthetic datasets with the attributes beltkit.field's
functions write; the checks read the drawn lines back from the figure
(matplotlib, PyPI) and compare them with the inputs.
"""

from __future__ import annotations

import matplotlib
import numpy as np
import xarray as xr

from beltkit.field import IGRF, T89, CenteredDipole
from beltkit.field.lshell import model_attrs
from beltkit.plot import field_model_comparison

matplotlib.use("Agg")

T = np.datetime64("2027-03-08T01:00") + np.arange(5) * np.timedelta64(10, "m")


def _run(model, lstar, dlc):
    return xr.Dataset({"lstar": ("time", np.asarray(lstar, float)),
                       "dlc_equatorial": ("time", np.asarray(dlc, float))},
                      coords={"time": T}, attrs=model_attrs(model))


def test_lines_labels_and_gaps():
    base = np.array([2.0, 2.5, 3.0, 3.5, 4.0])
    runs = [_run(CenteredDipole(), base, [10, 8, 6, 5, 4]),
            _run(IGRF(), base + 0.05, [11, 9, 7, 6, 5]),
            _run(T89(kp=1.0), base - 0.02, [11, 9, 7, 6, 5]),
            _run(T89(kp=6.0), [1.9, 2.3, np.nan, 3.0, 3.3], [12, 10, np.nan, 7, 6])]
    fig = field_model_comparison(runs)
    ax_l, ax_c = fig.axes[:2]
    labels = [ln.get_label() for ln in ax_l.get_lines()]
    assert labels == ["centred dipole", "IGRF", "IGRF + T89, Kp 1", "IGRF + T89, Kp 6"]
    assert [ln.get_label() for ln in ax_c.get_lines()] == labels
    assert ax_l.get_ylabel() == "Roederer L* (1)"
    assert ax_c.get_ylabel() == "equatorial drift loss cone (degree)"
    assert ax_c.get_xlabel() == "time (UTC)"
    assert [t.get_text() for t in ax_l.get_legend().get_texts()] == labels
    # the data drawn are the inputs, NaN kept as a gap
    np.testing.assert_allclose(ax_l.get_lines()[1].get_ydata(), base + 0.05)
    storm = ax_c.get_lines()[3]
    assert np.isnan(storm.get_ydata()[2]) and storm.get_linestyle() == "--"
    # the two T89 runs share a colour (one model family), the quiet one solid
    quiet = ax_l.get_lines()[2]
    assert quiet.get_color() == ax_l.get_lines()[3].get_color() and quiet.get_linestyle() == "-"
    assert ax_l.get_lines()[0].get_color() != quiet.get_color()
    # nudge: a T89 run over the dipole is named so
    fig2 = field_model_comparison([_run(T89(kp=3.0, internal=CenteredDipole()), base, base)])
    assert fig2.axes[0].get_lines()[0].get_label() == "dipole + T89, Kp 3"
