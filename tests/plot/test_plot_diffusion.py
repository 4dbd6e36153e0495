"""The diffusion figure of beltkit.plot: panels, scales, labels and the drawn values."""

import numpy as np
import pytest
from _diffusion_data import bins_dataset, telescope_dataset

from beltkit import diffusion, plot


@pytest.fixture(scope="module")
def event():
    # synthetic orbit segment (invented data): z0 falls from strong to weak diffusion
    z0 = np.geomspace(0.2, 20.0, 60)
    ds = bins_dataset(z0, seed=2)
    ds = ds.assign(L=("time", np.linspace(3.0, 6.0, 60), {"units": "1"}))
    return ds, diffusion.from_pitch_angle_data(ds)


def test_overview_panels_and_values(event):
    ds, res = event
    fig = plot.diffusion_overview(res, ds, energy=300.0)
    ax_d, ax_p = fig.axes
    assert ax_d.get_yscale() == "log"
    assert ax_d.get_xlabel() == "L"
    assert "s$^{-1}$" in ax_d.get_ylabel()
    assert "half bounce" in ax_d.get_title()
    labels = [t.get_text() for t in ax_d.get_legend().get_texts()]
    assert "strong diffusion (z0 < 1)" in labels and "weak diffusion (z0 > 1)" in labels
    # the points drawn are the D values of the result, at the samples' L
    strong = next(line for line in ax_d.get_lines() if line.get_label().startswith("strong"))
    d = res["diffusion_coefficient"].isel(energy=0).values
    reg = res["diffusion_regime"].isel(energy=0).values
    sel = np.isfinite(d) & (reg == 1)
    np.testing.assert_allclose(strong.get_ydata(), d[sel])
    np.testing.assert_allclose(strong.get_xdata(), ds["L"].values[sel])
    # right panel: fitted profile equals loss_cone_profile; measured points near it
    fitted = next(line for line in ax_p.get_lines() if line.get_label().startswith("fitted"))
    u, f = fitted.get_xdata(), fitted.get_ydata()
    assert f[np.argmin(np.abs(u - 1.0))] == pytest.approx(1.0, abs=0.02)
    measured = next(line for line in ax_p.get_lines() if line.get_label().startswith("measured"))
    mu, mf = measured.get_xdata(), measured.get_ydata()
    assert mu.size >= 4
    np.testing.assert_allclose(mf, np.interp(mu, u, f), rtol=0.1)
    assert "alpha_{eq}" in ax_p.get_xlabel()


def test_overview_for_telescopes_and_chosen_time(tmp_path):
    ds = telescope_dataset(np.geomspace(0.5, 5.0, 20))
    res = diffusion.from_pitch_angle_data(ds)
    fig = plot.diffusion_overview(res, ds, time=str(res.time.values[3]))
    assert str(res.time.values[3])[:19].replace("T", " ") in fig.axes[1].get_title()
    fig.savefig(tmp_path / "d.png")
    assert (tmp_path / "d.png").stat().st_size > 10_000
