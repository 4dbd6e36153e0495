r"""The demo pipeline: generate the mission, summarise, survey, compute PSD and draw figures."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from .scenario import SCENARIO
from .spacecraft import generate, generate_coverage, tern_flux_model

__all__ = [
    "demo_figures",
    "run_demo",
    "survey_dials",
    "survey_is_partial",
    "tern_psd_profiles",
]


_DIPOLE_QUASI_NOTE = ("quasi-trapped fraction: zero in every cell (centred dipole: the drift "
                      "loss cone equals the bounce loss cone), so no panel is drawn for it")


def survey_is_partial(summaries, craft):
    """Whether any summary of `craft` comes from data covering part of the sphere."""
    from ..plot import partial_coverage

    flags = []
    for path in summaries:
        if f"_{craft}_" in Path(path).name:
            with xr.open_dataset(path) as s:
                flags.append(partial_coverage(s))
    return any(flags)


def _caption(pairs, craft, partial):
    """Figure note naming how much of the sphere the instrument sees (from a data file)."""
    if not partial:
        return ""
    for name, (data, _) in pairs.items():
        if f"_{craft}_" in name:
            with xr.open_dataset(data) as ds:
                if "look_half_angle" in ds:
                    half = np.asarray(ds["look_half_angle"].values, float)
                    return (f"{ds.attrs.get('spacecraft', craft)}: {half.size} telescopes of "
                            f"{float(half.max()):g}° half-angle. The files' true_fraction_* "
                            "(shares of the whole distribution) are a different quantity, "
                            "not recovered by the pipeline.")
    return ""


def _all_zero(survey, quantity, e_kev):
    """Whether a survey quantity is zero in every cell with data at the energy."""
    sv = xr.load_dataset(survey) if not isinstance(survey, xr.Dataset) else survey
    if f"{quantity}_mean" not in sv:
        return False
    v = np.asarray(sv[f"{quantity}_mean"].sel(energy=e_kev, method="nearest").values, float)
    v = v[np.isfinite(v)]
    return v.size > 0 and not np.any(v != 0)


def _survey_l_time(survey, e_kev, partial):
    """L-time maps: precipitating fraction, quasi-trapped (unless zero) and flux."""
    from matplotlib.figure import Figure

    from .. import plot

    quantities = ["fraction_precipitating", "fraction_quasi_trapped", "omni_flux"]
    zero_quasi = _all_zero(survey, "fraction_quasi_trapped", e_kev)
    if zero_quasi:
        quantities.remove("fraction_quasi_trapped")
    fig = Figure(figsize=(9.0, 2.9 * len(quantities) + 0.6), layout="constrained")
    axes = fig.subplots(len(quantities), 1, sharex=True)
    for ax, quantity in zip(axes, quantities):
        plot.survey_map(survey, quantity, energy=e_kev, kind="L-time", ax=ax, partial=partial)
    for ax in axes[:-1]:
        ax.set_xlabel("")
    if zero_quasi:
        fig.supxlabel(_DIPOLE_QUASI_NOTE, fontsize="small")
    return fig


def survey_dials(survey, e_kev, partial, caption=""):
    """L-MLT dials of the precipitating and (unless zero) quasi-trapped fractions."""
    from matplotlib.figure import Figure

    from .. import plot

    quantities = ["fraction_precipitating"]
    zero_quasi = _all_zero(survey, "fraction_quasi_trapped", e_kev)
    if not zero_quasi:
        quantities.append("fraction_quasi_trapped")
    fig = Figure(figsize=(7.0 * len(quantities), 7.6), layout="constrained")
    axes = []
    for k, quantity in enumerate(quantities):
        ax = fig.add_subplot(1, len(quantities), k + 1, projection="polar")
        plot.survey_map(survey, quantity, energy=e_kev, kind="L-MLT", ax=ax, partial=partial)
        axes.append(ax)
    notes = [n for n in (_DIPOLE_QUASI_NOTE if zero_quasi else "", caption) if n]
    if notes:
        import textwrap

        fig.supxlabel("\n".join(textwrap.fill(n, 95 * len(quantities)) for n in notes),
                      fontsize="small")
    return fig


def demo_figures(data_files, summaries, surveys, fig_dir, psd_files=()) -> list[Path]:
    """Draw the demonstration figures as PNG files.

    Quantities from partially covered data (the Dunlin telescopes) are
    labelled as shares of the measured solid angle, detected from the
    summaries' coverage (:func:`beltkit.plot.partial_coverage`), not from the
    spacecraft's name; fractions beyond L = 10 (:data:`beltkit.plot.L_VALID_MAX`)
    are greyed out.

    Parameters
    ----------
    data_files : sequence of path
        The synthetic day-files from :func:`generate`.
    summaries : sequence of path
        Their summaries (same order).
    surveys : dict of str to path
        Survey files keyed by spacecraft (``"tern"``, ``"dunlin"``).
    fig_dir : str or os.PathLike
        Folder for the PNG files.
    psd_files : sequence of path, optional
        Marram-Tern's phase-space density files (:func:`beltkit.batch.psd_files`):
        their radial profiles at mu = 1000 MeV/G (``tern_psd_profiles.png``).

    Returns
    -------
    list of pathlib.Path
        The PNG files written.
    """
    from .. import plot

    fig_dir = Path(fig_dir)
    fig_dir.mkdir(parents=True, exist_ok=True)
    pairs = {Path(d).name: (Path(d), Path(s)) for d, s in zip(data_files, summaries)}
    storm_day = SCENARIO["storm_onset"][:10].replace("-", "")
    written = []

    def save(fig, name):
        path = fig_dir / name
        tmp = fig_dir / f".{name}.tmp.png"
        fig.savefig(tmp, dpi=120)
        tmp.replace(path)
        written.append(path)

    tern = pairs.get(f"marram_tern_fan_synthetic_{storm_day}.nc")
    if tern is not None:
        with xr.open_dataset(tern[0]) as ds, xr.open_dataset(tern[1]) as summary:
            ds, summary = ds.load(), summary.load()
        save(plot.pitch_angle_distribution(ds, summary, "2027-03-09T07:00",
                                           energies=[50, 160, 520, 1700, 3000]),
             "tern_pitch_angle_distribution.png")
        save(plot.spectrogram(ds, summary, energy=300.0), "tern_spectrogram.png")
    dunlin = pairs.get(f"marram_dunlin_quill_synthetic_{storm_day}.nc")
    if dunlin is not None:
        with xr.open_dataset(dunlin[0]) as ds, xr.open_dataset(dunlin[1]) as summary:
            ds, summary = ds.load(), summary.load()
        save(plot.spectrogram(ds, summary, energy=300.0), "dunlin_spectrogram.png")
        if "z0" in summary.variables and "true_z0" in ds.variables:
            event = np.flatnonzero(np.isfinite(ds["true_z0"].values).any(axis=1))
            if event.size:  # the scattering event: D against L, and one sample's profile
                res = summary.isel(time=event)
                # the profile of a sample near the regime boundary (z0 ~ 1): both looks'
                # points stand clear of the panel's lower edge
                z0 = res["z0"].sel(energy=190.0, method="nearest").values
                pick = res["time"].values[np.nanargmin(np.abs(np.log(z0)))]
                fig = plot.diffusion_overview(res, ds.isel(time=event), energy=190.0,
                                              time=pick)
                ax = fig.axes[1]  # the profile rises to the right: its legend goes top left
                size = ax.get_legend().get_texts()[0].get_fontsize()
                ax.legend(loc="upper left", fontsize=size)
                save(fig, "dunlin_diffusion.png")
    for craft, e_kev in (("tern", 160.0), ("dunlin", 190.0)):
        if craft not in surveys:
            continue
        partial = survey_is_partial(summaries, craft)
        if craft == "tern":
            save(_survey_l_time(surveys[craft], e_kev, partial), f"{craft}_survey_L_time.png")
        save(survey_dials(surveys[craft], e_kev, partial, _caption(pairs, craft, partial)),
             f"{craft}_survey_L_MLT.png")
    save(plot.loss_cone_longitude(1.5, SCENARIO["storm_onset"], n_lon=48),
         "loss_cones_vs_longitude.png")
    if psd_files:
        save(plot.psd_radial_profiles(tern_psd_profiles(psd_files)), "tern_psd_profiles.png")
    return written


def tern_psd_profiles(psd_files, mu_mev_per_g=1000.0):
    """Radial profiles of Marram-Tern's phase-space density files, per pass.

    Parameters
    ----------
    psd_files : sequence of path
        The day-files' outputs of :func:`beltkit.batch.psd_files`.
    mu_mev_per_g : float
        First invariant of the profiles (the first K of the files).

    Returns
    -------
    xarray.Dataset
        :func:`beltkit.psd.radial_profiles` in L* bins 0.25 wide from 2.5 to 6.
    """
    from .. import psd

    parts = []
    for path in sorted(psd_files):
        with xr.open_dataset(path) as one:
            parts.append(one.load())
    combined = xr.concat(parts, "time", data_vars="minimal", coords="minimal",
                         compat="override")
    return psd.radial_profiles(combined, mu_mev_per_g, float(combined["k"][0]),
                               lstar_bins=np.arange(2.5, 6.01, 0.25))


def _dunlin_geographic(out: Path) -> list[Path]:
    """Map a day of Dunlin orbits (summarized in the IGRF) by longitude and latitude.

    At 650 km the IGRF's drift loss cone leaves stably trapped electrons only
    where the field is weakest along their drift, over the South Atlantic: the
    map of the trapped flux shows it. Writes ``coverage/`` (the data file and
    its summary), ``survey_dunlin_geo.nc`` and ``figures/dunlin_survey_geo.png``.
    """
    from .. import batch, plot

    cover = generate_coverage(out / "coverage", cadence_s=20.0)  # ~7 samples per cell
    [done] = batch.summarize([cover], out / "coverage", model="auto", overwrite=True)
    if done.status == "failed":
        raise RuntimeError(f"demo coverage summary failed: {done.input}: {done.reason}")
    geo = Path(batch.survey([done.output], out / "survey_dunlin_geo.nc", binning="lon-lat",
                            edges={"lon": np.arange(-180.0, 180.1, 20.0),
                                   "lat": np.arange(-90.0, 90.1, 10.0)}))
    fig = plot.survey_cells(geo, "flux_trapped", partial=True)
    fig_dir = out / "figures"
    fig_dir.mkdir(parents=True, exist_ok=True)
    png = fig_dir / "dunlin_survey_geo.png"
    tmp = fig_dir / ".dunlin_survey_geo.png.tmp.png"
    fig.savefig(tmp, dpi=120)
    tmp.replace(png)
    return [cover, Path(done.output), geo, png]


def run_demo(out_dir, *, n_days=None) -> list[Path]:
    """Generate the scenario, run the pipeline on it and draw the figures.

    Writes into `out_dir`: the synthetic day-files (``data/``), one loss-cone
    summary per file (``summaries/``, :func:`beltkit.batch.summarize`: Tern in
    the centred dipole its truth is defined in, Dunlin with ``model="auto"``,
    i.e. the IGRF at each sample's time, and with the pitch-angle diffusion
    outputs, ``diffusion=True``), one survey per spacecraft
    (``survey_tern.nc``, hourly windows, and ``survey_dunlin.nc``, daily windows;
    :func:`beltkit.batch.survey`), Marram-Tern's phase-space density at fixed mu
    and K (``psd/``, :func:`beltkit.batch.psd_files` in the centred dipole),
    PNG figures (``figures/``, :func:`demo_figures`, with the radial profiles of f),
    and Dunlin's geographic map: a day of orbits (``coverage/``,
    :func:`generate_coverage`) surveyed by longitude and latitude
    (``survey_dunlin_geo.nc``, ``figures/dunlin_survey_geo.png``), where the
    South Atlantic shows in the trapped flux.

    Parameters
    ----------
    out_dir : str or os.PathLike
        Target folder (created if missing).
    n_days : int, optional
        Days of the scenario to use (default all 3; the storm begins on day 2).

    Returns
    -------
    list of pathlib.Path
        Every file written.
    """
    from .. import batch

    out = Path(out_dir)
    data_files = generate(out / "data", n_days=n_days)
    results = []
    # Tern's truth (the recovery target) is defined in the centred dipole; Dunlin's files
    # carry position_geo, so model="auto" partitions them in the IGRF at each sample's time
    # Dunlin's summaries add the pitch-angle diffusion outputs (its scattering event) and,
    # at its low orbit, the losses per hemisphere (down-going and up-going)
    for craft, model, extra in (("tern", "dipole", False), ("dunlin", "auto", True)):
        files = [d for d in data_files if f"_{craft}_" in Path(d).name]
        if files:
            results += batch.summarize(files, out / "summaries", model=model, overwrite=True,
                                       diffusion=extra or None, hemispheres=extra)
    order = {str(d): k for k, d in enumerate(data_files)}
    results.sort(key=lambda r: order.get(r.input, len(order)))
    bad = [r for r in results if r.status == "failed"]
    if bad:
        raise RuntimeError("demo summaries failed: " + "; ".join(
            f"{r.input}: {r.reason}" for r in bad))
    summaries = [Path(r.output) for r in results]
    surveys = {}
    # Dunlin's bins reach L = 12 so that the survey maps show (grey) where data
    # beyond beltkit.plot.L_VALID_MAX = 10 were left out
    for craft, window, l_top, l_step in (("tern", "1h", 7.0, 0.25), ("dunlin", "1D", 12.0, 0.5)):
        files = [s for s in summaries if f"_{craft}_" in s.name]
        if files:
            surveys[craft] = Path(batch.survey(files, out / f"survey_{craft}.nc",
                                               l_edges=np.arange(1.0, l_top + 0.01, l_step),
                                               time_window=window))
    tern = [d for d in data_files if "_tern_" in Path(d).name]
    psd_out = []
    if tern:
        p = SCENARIO["tern"]
        done = batch.psd_files(tern, out / "psd", p["psd_mu_mev_per_g"], p["psd_k_g05_re"],
                               model="dipole", overwrite=True)
        bad = [r for r in done if r.status == "failed"]
        if bad:
            raise RuntimeError("demo phase-space density failed: " + "; ".join(
                f"{r.input}: {r.reason}" for r in bad))
        psd_out = [Path(r.output) for r in done]
    geo_out = _dunlin_geographic(out) if any("_dunlin_" in Path(d).name
                                             for d in data_files) else []
    figures = demo_figures(data_files, summaries, surveys, out / "figures", psd_files=psd_out)
    from .sectors import run_sectors  # the spectrometer as spin-sectored counts, binned

    figures += run_sectors(out, flux_model=tern_flux_model)
    report = sorted(p for folder in ("summaries", "psd") if (out / folder).is_dir()
                    for p in (out / folder).iterdir()
                    if p.is_file() and not p.name.endswith(".nc"))
    return [*data_files, *summaries, *psd_out, *report, *surveys.values(), *figures, *geo_out]
