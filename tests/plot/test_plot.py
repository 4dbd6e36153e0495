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
from beltkit.plot.surveys import nice_log_ticks  # noqa: E402

STORM = "2027-03-09T07:00"


DATA_DEMO = Path(__file__).resolve().parents[2] / "data_demo"


@pytest.fixture(scope="module")
def demo_data(tmp_path_factory):
    """Storm day of both spacecraft (committed demo files), summaries, a spectrometer survey."""
    out = {}
    for craft, stem in (("tern", "marram_tern_fan"), ("dunlin", "marram_dunlin_quill")):
        with xr.open_dataset(DATA_DEMO / f"{stem}_synthetic_20270309.nc") as ds:
            ds = ds.load()
        # Tern as the demo runs it (centred dipole); Dunlin with the default model="auto",
        # which its position_geo makes the IGRF
        out[craft] = (ds, pad.partition(ds, model="dipole" if craft == "tern" else "auto"))
    root = tmp_path_factory.mktemp("plotdata")
    tern_files = sorted(DATA_DEMO.glob("marram_tern_fan_synthetic_*.nc"))
    results = batch.summarize(tern_files, root / "summaries", model="dipole")
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
    cone = [t for t in labels if t.startswith("bounce loss cone")]
    # the legend says which angle is which hemisphere's cone
    north_text = f"{float(summary['loss_cone_north'].sel(time=STORM, method='nearest')):.1f}°"
    assert len(cone) == 1 and f"{north_text} north-going" in cone[0]
    assert "south-going" in cone[0]
    # three energies drawn with three different line styles (not colour alone)
    styles = {c.lines[0].get_linestyle() for c in ax.containers if c.get_label() in labels}
    assert len(ax.containers) == 3 and len(styles) == 3
    # shaded cone widths are the summary's loss cones at that time
    north = float(summary["loss_cone_north"].sel(time=STORM, method="nearest"))
    spans = [p for p in ax.patches if p.get_label().startswith("bounce loss cone")]
    assert spans and np.isclose(spans[0].get_x() + spans[0].get_width(), north)


def test_pitch_angle_distribution_telescopes_and_existing_axes(demo_data):
    ds, summary = demo_data["dunlin"]
    fig = Figure()
    ax = fig.add_subplot()
    out = plot.pitch_angle_distribution(ds, summary, ds["time"].values[500], ax=ax)
    assert out is fig and fig.axes[0] is ax
    _labelled(ax)


def test_energy_and_pitch_angle_time_spectrograms(demo_data):
    for craft in ("tern", "dunlin"):
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
        dashed = [ln for ln in fig.axes[0].get_lines() if ln.get_linestyle() == "--"]
        if craft == "tern":  # centred dipole: the cones coincide, one line pair, one label
            assert labels == ["bounce = drift loss cone (centred dipole)"]
            assert not dashed
        else:  # IGRF at 650 km: a distinct (wider) drift loss cone
            assert labels == ["bounce loss cone", "drift loss cone"] and len(dashed) == 2


def test_pitch_angle_time_draws_a_distinct_drift_loss_cone(demo_data):
    ds, summary = demo_data["tern"]
    wider = summary.assign(dlc_local=summary["dlc_local"] + 2.0)  # as in a non-dipole field
    wider.attrs["beltkit_field_model"] = "igrf"
    fig = plot.pitch_angle_time(ds, 300.0, summary=wider)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert labels == ["bounce loss cone", "drift loss cone"]
    dashed = [ln for ln in fig.axes[0].get_lines() if ln.get_linestyle() == "--"]
    assert len(dashed) == 2
    np.testing.assert_allclose(dashed[0].get_ydata(), wider["dlc_local"].values)


def _texts(fig):
    """Every piece of text on a figure: titles, axis and colour-bar labels, legends, notes."""
    out = [t.get_text() for t in fig.findobj(matplotlib.text.Text)]
    return "\n".join(out)


def test_partial_coverage_detection(demo_data):
    # Fan bins tile the sphere; two 15-degree Quill caps do not
    assert plot.partial_coverage(demo_data["tern"][1]) is False
    assert plot.partial_coverage(demo_data["dunlin"][1]) is True
    flags_only = xr.Dataset({"partition_flag": ("time", np.array([0, 8, 0], np.int16))})
    assert plot.partial_coverage(flags_only) is True
    assert plot.partial_coverage(flags_only.isel(time=[0, 2])) is False
    survey_means = xr.Dataset({"coverage_trapped_mean": ("L", [1.0, np.nan, 0.7])})
    assert plot.partial_coverage(survey_means) is True
    assert plot.partial_coverage(xr.Dataset()) is False


def test_spectrogram_three_panels(demo_data):
    ds, summary = demo_data["tern"]
    fig = plot.spectrogram(ds, summary, energy=160.0)
    assert isinstance(fig, Figure)
    panels = [a for a in fig.axes if a.get_label() != "<colorbar>"]
    assert len(panels) >= 3
    assert panels[2].get_ylabel() == "precipitating fraction"  # dimensionless: no "(1)"
    assert panels[2].get_xlabel() == "time (UTC)"
    assert len(_colorbar_labels(fig)) == 2
    assert fig.get_suptitle() == "Marram-Tern, 2027-03-09 00:00\u201323:58 UTC"
    # full coverage: no partial-coverage wording anywhere
    text = _texts(fig)
    assert "partial coverage" not in text and "measured solid angle" not in text
    assert "omnidirectional" in _colorbar_labels(fig)[0]


def test_spectrogram_of_telescopes_says_partial_coverage(demo_data):
    ds, summary = demo_data["dunlin"]
    fig = plot.spectrogram(ds, summary)
    panels = [a for a in fig.axes if a.get_label() != "<colorbar>"]
    ylabel = panels[2].get_ylabel().replace("\n", " ")
    assert "quasi-trapped fraction of the measured flux" in ylabel  # IGRF: quasi-trapped drawn
    assert ylabel.startswith("precipitating (per energy)") and "partial coverage" in ylabel
    quasi = [ln for ln in panels[2].get_lines() if ln.get_label().startswith("quasi-trapped")]
    assert [ln.get_label() for ln in quasi] == ["quasi-trapped, 190 keV"]
    k = int(np.argmin(np.abs(summary["energy"].values - 300.0)))
    expected = summary["fraction_quasi_trapped"].isel(energy=k).values.astype(float)
    drawn = np.asarray(quasi[0].get_ydata(), float)
    shown = np.isfinite(drawn)
    np.testing.assert_allclose(drawn[shown], expected[shown])
    assert np.nanmax(drawn) > 0.5
    assert "flux over the measured solid angle" in _colorbar_labels(fig)[0]
    assert "omnidirectional" not in _texts(fig)
    title = fig.get_suptitle()
    # the two orbits of the file: 06:00:00 to 09:15:09 UTC
    assert title.startswith("Marram-Dunlin, 2027-03-09 06:00\u201309:15 UTC")
    assert "only part of the sphere" in title.replace("\n", " ")
    # fractions beyond L = 10 are not drawn; those times are greyed
    beyond = ds["L"].values > plot.L_VALID_MAX
    assert beyond.any() and (~beyond).any()
    fraction_lines = [ln for ln in panels[2].get_lines()
                      if ln.get_label().endswith(("keV", "MeV"))
                      and not ln.get_label().startswith("quasi")]
    assert len(fraction_lines) == ds.sizes["energy"]
    for line in fraction_lines:
        y = np.asarray(line.get_ydata(), float)
        assert np.isnan(y[beyond]).all() and np.isfinite(y[~beyond]).any()
    greyed = [p for p in panels[2].patches if p.get_facecolor()[:3] == (0.82, 0.82, 0.82)]
    starts = np.flatnonzero(np.diff(np.concatenate([[0], beyond.astype(int)])) == 1)
    assert len(greyed) == starts.size == 4
    assert "L > 10" in panels[2].get_title()
    # l_max=None draws every sample
    fig = plot.spectrogram(ds, summary, l_max=None)
    bottom = [a for a in fig.axes if a.get_label() != "<colorbar>"][2]
    y = np.asarray(bottom.get_lines()[0].get_ydata(), float)
    assert np.isfinite(y[beyond]).any()


def test_spectrogram_accepts_ax_or_axes(demo_data):
    ds, summary = demo_data["tern"]
    for key in ("ax", "axes"):
        fig = Figure(figsize=(8, 8))
        axes = fig.subplots(3, 1)
        out = plot.spectrogram(ds, summary, **{key: axes})
        assert out is fig
        # the span goes into the top panel's title when the figure is the caller's
        assert axes[0].get_title().startswith("Marram-Tern, 2027-03-09 00:00")
        assert axes[2].get_ylabel() == "precipitating fraction"
    with pytest.raises(TypeError, match="ax= or as axes="):
        plot.spectrogram(ds, summary, ax=axes, axes=axes)
    with pytest.raises(ValueError, match="3 axes"):
        plot.spectrogram(ds, summary, ax=axes[:2])


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
    if quantity.startswith("fraction"):
        assert _colorbar_labels(fig)[0] == quantity.replace("fraction_", "").replace(
            "_", "-") + " fraction"  # dimensionless: no "(1)"
    assert "partial coverage" not in _texts(fig)  # spectrometer survey: full coverage


@pytest.mark.parametrize("quantity", ["fraction_precipitating", "omni_flux"])
def test_survey_map_of_partially_covered_data(demo_data, quantity):
    fig = plot.survey_map(demo_data["survey"], quantity, energy=160.0, kind="L-MLT",
                          partial=True)
    bar = _colorbar_labels(fig)[0]
    title = fig.axes[0].get_title().replace("\n", " ")
    if quantity == "omni_flux":
        assert bar.startswith("flux over the measured solid angle") and "keV" in bar
        assert "omnidirectional" not in _texts(fig)
    else:
        assert bar == "precipitating fraction of the measured flux (partial coverage)"
        assert title.startswith("precipitating fraction of the measured flux at 161 keV")
    assert "only part of the sphere" in title
    # detected from coverage means in the survey when not given
    survey = xr.load_dataset(demo_data["survey"])
    with_cov = survey.assign(coverage_trapped_mean=survey["fraction_trapped_mean"] * 0 + 0.5)
    fig = plot.survey_map(with_cov, quantity, energy=160.0)
    assert "partial coverage" in _texts(fig)


def test_survey_map_greys_cells_above_l_max(demo_data):
    survey = xr.load_dataset(demo_data["survey"])
    fig = plot.survey_map(survey, "fraction_precipitating", energy=160.0, l_max=3.0)
    ax = fig.axes[0]
    shown = np.ma.getmaskarray(ax.collections[0].get_array()).reshape(
        survey.sizes["L"], survey.sizes["time"])
    upper = survey["L_bnds"].values[:, 0] >= 3.0
    assert shown[upper].all() and not shown[~upper].all()
    grey = ax.collections[1].get_array()
    assert grey.count() > 0  # the grey layer covers cells that had data above L = 3
    assert "grey: L > 3" in ax.get_title()
    fig = plot.survey_map(survey, "fraction_precipitating", energy=160.0)
    assert len(fig.axes[0].collections) == 1 and "grey" not in fig.axes[0].get_title()


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
    # centred dipole: the two cones coincide, so one line (no dashed line hidden under it)
    assert set(lines) == {"dipole: bounce = drift loss cone (centred dipole)",
                          "igrf: bounce loss cone", "igrf: drift loss cone"}
    assert lines["igrf: drift loss cone"].get_linestyle() == "--"
    # centred dipole: no longitude dependence; IGRF: the drift loss cone bounds the bounce one
    dip = lines["dipole: bounce = drift loss cone (centred dipole)"].get_ydata()
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


# ------------------------------------------------------------------ figures that do not mislead


def _colour_bar(fig):
    return next(a for a in fig.axes if a.get_label() == "<colorbar>")


@pytest.mark.parametrize("span", [3.0, 1.2])
def test_log_colour_scale_follows_the_data(demo_data, span):
    """A log scale spans the data's finite range, not a forced decade, with labelled ticks."""
    survey = xr.load_dataset(demo_data["survey"])
    mean = survey["omni_flux_mean"]
    finite = np.isfinite(mean)
    # values from 2e5 to span * 2e5 where the survey has data
    ramp = np.linspace(0.0, 1.0, mean.size).reshape(mean.shape)
    values = 2e5 * span ** ramp
    survey["omni_flux_mean"] = mean.copy(data=np.where(finite, values, np.nan))
    fig = plot.survey_map(survey, "omni_flux", energy=160.0)
    norm = fig.axes[0].collections[0].norm
    shown = np.ma.compressed(fig.axes[0].collections[0].get_array())
    assert isinstance(norm, LogNorm)
    # limits = the finite range of what is drawn (the old scale spanned 10x the minimum)
    assert norm.vmin == pytest.approx(shown.min()) and norm.vmax == pytest.approx(shown.max())
    assert norm.vmax / norm.vmin == pytest.approx(shown.max() / shown.min())
    assert norm.vmax / norm.vmin < span * 1.0001  # nudge: not a forced decade
    bar = _colour_bar(fig)
    ticks = [t for t in bar.get_yticks() if norm.vmin <= t <= norm.vmax]
    labels = [t.get_text() for t in bar.get_yticklabels() if t.get_text()]
    assert len(ticks) >= 2 and len(labels) >= 2  # readable: at least two labelled values
    for text in labels:  # plain numbers, each within the scale
        assert norm.vmin * 0.999 <= float(text) <= norm.vmax * 1.001


def test_nice_log_ticks_cover_the_range():
    # 1-2-5 ticks over decades; finer mantissas for short ranges (always two or more)
    np.testing.assert_allclose(nice_log_ticks(1.0, 1000.0), [1, 10, 100, 1000])
    np.testing.assert_allclose(nice_log_ticks(1e5, 3e5), [1e5, 1.5e5, 2e5, 3e5])
    ticks = nice_log_ticks(0.21, 0.24)
    assert ticks.size >= 2 and ticks.min() >= 0.21 and ticks.max() <= 0.24


def _label_angles(ax):
    """Data angle (rad) and L of every non-empty radial tick label of a polar axes."""
    out = []
    inv = ax.transData.inverted()
    for label in ax.get_yticklabels():
        if label.get_text():
            theta, r = inv.transform(label.get_transform().transform(label.get_position()))
            out.append((theta % (2 * np.pi), r, float(label.get_text())))
    return out


def test_polar_l_labels_do_not_sit_on_data(demo_data):
    survey = xr.load_dataset(demo_data["survey"])
    fig = plot.survey_map(survey, "fraction_precipitating", energy=160.0, kind="L-MLT")
    fig.canvas.draw()
    ax = fig.axes[0]
    cells = np.ma.getmaskarray(ax.collections[0].get_array()).reshape(
        survey.sizes["L"], survey.sizes["mlt"])  # True: no data
    l_edges = np.append(survey["L_bnds"].values[:, 0], survey["L_bnds"].values[-1, 1])
    m_edges = np.append(survey["mlt_bnds"].values[:, 0], survey["mlt_bnds"].values[-1, 1])
    placed = _label_angles(ax)
    assert placed
    for theta, r, value in placed:
        j = int(np.searchsorted(m_edges / 24 * 2 * np.pi, theta, side="right") - 1)
        assert r == pytest.approx(value)
        near = (l_edges[:-1] < value + 0.3) & (l_edges[1:] > value - 0.3)
        assert cells[near, j].all(), (value, j)  # no data cell under or beside the label
    # every sector full of data: no label inside the dial, the rings named in the axis label
    full = survey.copy()
    full["fraction_precipitating_mean"] = full["fraction_precipitating_mean"].fillna(0.01)
    full["fraction_precipitating_count"] = full["fraction_precipitating_count"] + 1
    fig = plot.survey_map(full, "fraction_precipitating", energy=160.0, kind="L-MLT")
    ax = fig.axes[0]
    assert not [t for t in ax.get_yticklabels() if t.get_text()]
    assert "rings: L = 2, 3" in ax.get_xlabel()


@pytest.mark.parametrize(("cone", "text"), [(0.2, "0.20°"), (5.0, "5.0°")])
def test_a_narrow_loss_cone_stays_visible(demo_data, cone, text):
    ds, summary = demo_data["tern"]
    narrow = summary.assign(loss_cone_north=summary["loss_cone_north"] * 0 + cone,
                            loss_cone_south=summary["loss_cone_south"] * 0 + cone,
                            blc_local=summary["blc_local"] * 0 + cone,
                            dlc_local=summary["dlc_local"] * 0 + cone)
    fig = plot.pitch_angle_distribution(ds, narrow, STORM)
    ax = fig.axes[0]
    spans = [p for p in ax.patches if p.get_label().startswith("bounce loss cone")]
    width = spans[0].get_width()
    # shaded at least MIN_CONE_WIDTH_DEG wide (1.5 deg of 180: visible), never narrower
    assert width == pytest.approx(max(cone, plot.MIN_CONE_WIDTH_DEG))
    # the true edges as lines at the cone angle and 180 minus it
    edges = sorted(float(ln.get_xdata()[0]) for ln in ax.get_lines()
                   if len(ln.get_xdata()) == 2 and ln.get_xdata()[0] == ln.get_xdata()[1])
    assert edges == pytest.approx([cone, 180.0 - cone])
    label = spans[0].get_label()
    assert f"{text} north-going / {text} south-going" in label  # two significant digits
    assert ("shaded at least" in label) is (cone < plot.MIN_CONE_WIDTH_DEG)
