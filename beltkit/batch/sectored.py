"""What a sectored file becomes: its pitch-angle file, binned slab by slab.

The product of :func:`beltkit.batch.bin_sectored` (``beltkit bin-sectors``):
:func:`beltkit.pad.bin_sectors` applied to consecutive time slabs of the open
file (read one slab at a time, so memory does not grow with the file's
length), written by the batch pipeline with the same safety as a summary
(atomic output, per-file failure line, skipped when up to date).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .. import __version__
from ..io.write import compress_level
from .options import mapping_key, settings_text
from .products import STREAM_SLAB, Product

__all__ = ["SECTORS_SUFFIX", "sectors_product", "sectors_settings"]

#: Suffix of the pitch-angle files written from sectored files.
SECTORS_SUFFIX = ".pad.nc"


def sectors_settings(edges_deg, model, gyrotropy_level, gyrotropy_tolerance, degenerate_deg,
                     mapping, compress) -> dict:
    """Return the settings of a sector-binning run (recorded in each output)."""
    return {
        "product": "sectors",
        "pitch_angle_edges_deg": [float(v) for v in np.asarray(edges_deg, float)],
        "field": model if model is not None else "b_vector",
        "gyrotropy_level": float(gyrotropy_level),
        "gyrotropy_tolerance": float(gyrotropy_tolerance),
        "degenerate_deg": float(degenerate_deg),
        "mapping": mapping_key(mapping),
        "compress": compress_level(compress),
    }


def sectors_product(ds, src: Path, task: dict) -> Product:
    """Return the pitch-angle file of one open sectored file as a :class:`Product`.

    The slabs are binned when the writer asks for them; a dataset problem
    (:class:`beltkit.errors.ConventionError`) raised by the first slab fails
    the file before anything is renamed into place.
    """
    from ..pad import bin_sectors

    settings = task["settings"]
    model = None if settings["field"] == "b_vector" else settings["field"]
    edges = np.asarray(settings["pitch_angle_edges_deg"], float)
    n = ds.sizes.get("time", 0)
    starts = range(0, n, STREAM_SLAB) if n else [0]
    options = {"model": model, "gyrotropy_level": settings["gyrotropy_level"],
               "gyrotropy_tolerance": settings["gyrotropy_tolerance"],
               "degenerate_deg": settings["degenerate_deg"]}
    first = bin_sectors(ds.isel(time=slice(0, STREAM_SLAB)), edges, **options)

    def slabs():
        yield first
        for a in starts[1:]:
            yield bin_sectors(ds.isel(time=slice(a, a + STREAM_SLAB)), edges, **options)

    def attrs_of(digest_text):
        return {
            "title": f"beltkit pitch-angle data binned from the sectors of {src.name}",
            "source": src.name,
            "source_sha256": digest_text,
            "beltkit_version": __version__,
            "beltkit_settings": settings_text(settings),
            "beltkit_sectors": first.attrs.get("beltkit_sectors", ""),
            "comment": "pitch-angle bins from spin sectors (beltkit.pad.bin_sectors; "
                       "docs/conventions.md section 9)",
        }

    return Product(slabs(), len(starts), None, attrs_of)
