"""Survey checkpoint: the partial aggregate kept beside the output, from which a survey resumes.

The file ``<out>`` + :data:`PARTIAL_SUFFIX` holds the open aggregates
(:meth:`beltkit.aggregate.CellStats.to_dataset`, one per window and
variable), the reduced windows (one ``(final_window, final_cell)`` array per
variable and statistic), the SHA-256 of every summary folded in, and a
fingerprint of the settings (:func:`settings_fingerprint`). It is written atomically
(:func:`beltkit.atomic.atomic_file`) and reused only if the fingerprint
matches and every folded summary still has its checksum.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import xarray as xr

from .. import __version__
from ..aggregate import CellStats
from ..atomic import atomic_file
from ..io import sha256
from .pipeline import FILE_LOCK

__all__ = ["PARTIAL_SUFFIX", "read_partial", "settings_fingerprint", "write_partial"]

#: Suffix of the partial aggregate kept beside the output while a survey runs.
PARTIAL_SUFFIX = ".partial"


def settings_fingerprint(spec) -> str:
    """Return the SHA-256 (hex) of the survey's settings.

    Parameters
    ----------
    spec : dict
        The survey's spec (:mod:`beltkit.batch.survey_fold`): axes and edges,
        variables, windows, energies, quantiles, histogram scales.

    Returns
    -------
    str
        Changes with any setting and with the beltkit version.
    """
    text = json.dumps({
        "axes": [[a.dim, a.source, list(a.edges)] for a in spec["axes"]],
        "names": spec["names"], "w_ns": spec["w_ns"], "win_ids": spec["win_ids"].tolist(),
        "energy": spec["energy"].tolist(), "quantiles": list(spec["quantiles"]),
        "scales": {n: [s.kind, s.lo, s.hi, s.n] for n, s in spec["scales"].items()},
        "beltkit_version": __version__,
    }, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()


def write_partial(path, fingerprint, done, open_stats, final) -> None:
    """Write the partial aggregate atomically.

    Parameters
    ----------
    path : path
        ``<out>`` + :data:`PARTIAL_SUFFIX`.
    fingerprint : str
        :func:`settings_fingerprint` of the settings.
    done : dict
        Path -> SHA-256 of every summary folded in.
    open_stats : dict
        Window -> name -> CellStats still open.
    final : dict
        Window -> name -> statistic -> array of the reduced windows.
    """
    parts, keys = [], []
    for w, stats in open_stats.items():
        for nm, s in stats.items():
            parts.append(s.to_dataset(prefix=f"s{len(keys)}_"))
            keys.append([int(w), nm])
    fin = sorted(final)
    if fin:  # reduced windows: one (window, cell) array per variable and statistic
        for nm, r in final[fin[0]].items():
            for stat in r:
                parts.append(xr.Dataset({f"f_{nm}_{stat}": (
                    ("final_window", "final_cell"), np.stack([final[w][nm][stat] for w in fin]))}))
    ds = xr.merge(parts) if parts else xr.Dataset()
    ds.attrs = {"beltkit_survey_fingerprint": fingerprint, "done": json.dumps(done),
                "open_keys": json.dumps(keys), "final_windows": json.dumps([int(w) for w in fin])}

    def fill(tmp):
        ds.to_netcdf(tmp, engine="netcdf4",
                     encoding={v: {"zlib": True, "complevel": 1} for v in ds.data_vars})

    with FILE_LOCK:  # the groups may be reading summaries in other threads meanwhile
        atomic_file(path, fill)


def read_partial(path, fingerprint, files, names, stat_names):
    """Reuse a partial aggregate whose settings and folded inputs' checksums still match.

    Parameters
    ----------
    path : path
        The partial aggregate.
    fingerprint : str
        :func:`settings_fingerprint` of the present settings.
    files : list of str
        The present summaries.
    names, stat_names : list of str
        The variables and statistics of the survey.

    Returns
    -------
    tuple or None
        ``(done, open_stats, final)`` as :func:`write_partial` took them, or
        None if the file is unreadable, foreign, of other settings, or a
        folded summary was dropped or changed (the survey then starts afresh).
    """
    try:
        with xr.open_dataset(path, engine="netcdf4", chunks=None) as ds:
            if ds.attrs.get("beltkit_survey_fingerprint") != fingerprint:
                return None
            done = json.loads(ds.attrs["done"])
            current = {str(p) for p in files}
            if any(p not in current or sha256(p) != sha for p, sha in done.items()):
                return None
            ds = ds.load()
            open_stats = {}
            for i, (w, nm) in enumerate(json.loads(ds.attrs["open_keys"])):
                open_stats.setdefault(w, {})[nm] = CellStats.from_dataset(ds, prefix=f"s{i}_")
            final = {}
            for j, w in enumerate(json.loads(ds.attrs["final_windows"])):
                final[w] = {nm: {st: ds[f"f_{nm}_{st}"].values[j] for st in stat_names}
                            for nm in names}
    except (OSError, KeyError, ValueError):  # unreadable or foreign: start afresh
        return None
    return done, open_stats, final
