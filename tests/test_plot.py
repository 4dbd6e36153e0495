"""Every figure function runs headless (Agg), returns a Figure, labels its axes and units."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402
import xarray as xr  # noqa: E402
from matplotlib.colors import LogNorm  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from beltkit import batch, pad, plot  # noqa: E402

STORM = "2027-03-09T07:00"


DATA_DEMO = Path(__file__).resolve().parents[1] / "data_demo"


@pytest.fixture(scope="module")
def demo_data(tmp_path_factory):
    """Storm day of both spacecraft (committed demo files), summaries, a spectrometer survey."""
    out = {}
    for craft, stem in (("tern", "marram_tern_fan"), ("swift", "marram_swift_quill")):
        with xr.open_dataset(DATA_DEMO / f"{stem}_synthetic_20270309.nc") as ds:
            ds = ds.load()
        out[craft] = (ds, pad.partition(ds).compute())
    root = tmp_path_factory.mktemp("plotdata")
    tern_files = sorted(DATA_DEMO.glob("marram_tern_fan_synthetic_*.nc"))
    results = batch.summarize(tern_files, root / "summaries")
    assert all(r.status == "ok" for r in results), [r.reason for r in results]
    out["survey"] = batch.survey([r.output for r in results], root / "survey.nc",
                                 time_window="3h")
    return out


def _labelled(ax):
    assert ax.get_xlabel().strip(), "x axis without a label"
    assert ax.get_ylabel().strip(), "y axis without a label"


def _colorbar_labels(fig):
    return [a.get_ylabel() for a in fig.axes if a.get_label() == "<colorbar>"]


def test_pitch_angle_distribution_bins(demo_data):
    ds, summary = demo_data["tern"]
    fig = plot.pitch_angle_distribution(ds, summary, STORM, energies=[50, 520, 3000])
    assert isinstance(fig, Figure)
    ax = fig.axes[0]
    _labelled(ax)
    assert "degree" in ax.get_xlabel() and "keV" in ax.get_ylabel()
    assert ax.get_yscale() == "log"
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "50 keV" in labels and "3 MeV" in labels
    assert any(t.startswith("bounce loss cone") for t in labels)
    # three energies drawn with three different line styles (not colour alone)
    styles = {c.lines[0].get_linestyle() for c in ax.containers if c.get_label() in labels}
    assert len(ax.containers) == 3 and len(styles) == 3
    # shaded cone widths are the summary's loss cones at that time
    north = float(summary["loss_cone_north"].sel(time=STORM, method="nearest"))
    spans = [p for p in ax.patches if p.get_label().startswith("bounce loss cone")]
    assert spans and np.isclose(spans[0].get_x() + spans[0].get_width(), north)


def test_pitch_angle_distribution_telescopes_and_existing_axes(demo_data):
    ds, summary = demo_data["swift"]
    fig = Figure()
    ax = fig.add_subplot()
    out = plot.pitch_angle_distribution(ds, summary, ds["time"].values[500], ax=ax)
    assert out is fig and fig.axes[0] is ax
    _labelled(ax)


def test_energy_and_pitch_angle_time_spectrograms(demo_data):
    for craft in ("tern", "swift"):
        ds, summary = demo_data[craft]
        for fig in (plot.energy_time(ds, summary=summary),
                    plot.energy_time(ds, pitch_angle=90.0),
                    plot.pitch_angle_time(ds, 300.0, summary=summary)):
            assert isinstance(fig, Figure)
            _labelled(fig.axes[0])
            bars = _colorbar_labels(fig)
            assert bars and all("cm$^{-2}$" in b and "keV" in b for b in bars)
            assert isinstance(fig.axes[0].collections[0].norm, LogNorm)
        fig = plot.pitch_angle_time(ds, 300.0, summary=summary)
        labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
        assert labels == ["bounce loss cone", "drift loss cone"]


def test_spectrogram_three_panels(demo_data):
    ds, summary = demo_data["tern"]
    fig = plot.spectrogram(ds, summary, energy=160.0)
    assert isinstance(fig, Figure)
    panels = [a for a in fig.axes if a.get_label() != "<colorbar>"]
    assert len(panels) >= 3
    assert panels[2].get_ylabel() == "precipitating fraction (1)"
    assert panels[2].get_xlabel() == "time (UTC)"
    assert len(_colorbar_labels(fig)) == 2


@pytest.mark.parametrize("kind", ["L-time", "L-MLT"])
@pytest.mark.parametrize("quantity", ["fraction_precipitating", "fraction_quasi_trapped",
                                      "omni_flux"])
def test_survey_maps(demo_data, kind, quantity):
    fig = plot.survey_map(demo_data["survey"], quantity, energy=160.0, kind=kind)
    assert isinstance(fig, Figure)
    ax = fig.axes[0]
    assert ax.get_xlabel().strip()
    if kind == "L-time":
        assert ax.get_ylabel() == "L-shell"
    else:
        assert "L-shell" in ax.get_xlabel() and ax.name == "polar"
    assert _colorbar_labels(fig)
    if quantity == "fraction_quasi_trapped":  # zero everywhere in the centred dipole
        assert "zero in every cell" in ax.get_title()
    if quantity == "omni_flux":
        assert "keV" in _colorbar_labels(fig)[0]
        assert isinstance(ax.collections[0].norm, LogNorm)


def test_survey_map_refuses_unknown_quantity(demo_data):
    with pytest.raises(KeyError, match="fraction_trapped"):
        plot.survey_map(demo_data["survey"], "no_such_thing")
    with pytest.raises(ValueError, match="kind"):
        plot.survey_map(demo_data["survey"], kind="time-L")


def test_loss_cone_longitude_dipole_and_igrf():
    fig = plot.loss_cone_longitude(1.4, "2027-03-09", n_lon=16)
    assert isinstance(fig, Figure)
    ax = fig.axes[0]
    _labelled(ax)
    assert "degree" in ax.get_xlabel() and "degree" in ax.get_ylabel()
    lines = {line.get_label(): line for line in ax.get_lines()}
    assert set(lines) == {"dipole: bounce loss cone", "dipole: drift loss cone",
                          "igrf: bounce loss cone", "igrf: drift loss cone"}
    assert lines["igrf: drift loss cone"].get_linestyle() == "--"
    # centred dipole: no longitude dependence; IGRF: the drift loss cone bounds the bounce one
    dip = lines["dipole: bounce loss cone"].get_ydata()
    assert np.ptp(dip) < 1e-6
    igrf_b = lines["igrf: bounce loss cone"].get_ydata()
    igrf_d = lines["igrf: drift loss cone"].get_ydata()
    assert np.all(igrf_d >= igrf_b - 1e-9) and np.ptp(igrf_b) > 1.0


def test_loss_cone_longitude_needs_inputs():
    with pytest.raises(ValueError, match="L and time"):
        plot.loss_cone_longitude()


def test_plot_functions_do_not_modify_inputs(demo_data):
    ds, summary = demo_data["tern"]
    before = ds.copy(deep=True)
    plot.spectrogram(ds, summary)
    plot.pitch_angle_distribution(ds, summary, STORM)
    xr.testing.assert_identical(ds, before)
