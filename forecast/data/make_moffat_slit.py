"""Tabulate the fraction of a Moffat PSF through a centred rectangle, for kncast.forecast.slit.

A plain script, not imported by kncast::

    python forecast/data/make_moffat_slit.py

Writes ``moffat_slit.ecsv`` beside it: the fraction of a circular Moffat profile of index
``kncast.forecast.slit.MOFFAT_BETA`` (FWHM 1) inside |x| < half_width, |y| < half_length, both on the
logarithmic grid ``kncast.forecast.slit.MOFFAT_GRID`` (in units of the FWHM), computed by
``kncast.forecast.slit.moffat_rectangle`` (closed form across, Gauss-Legendre along; scipy's incomplete
beta function).  kncast reads the table instead of computing it in every run (that needs scipy.special,
~0.1 s to import, and 0.05 s); ``tests/accuracy/test_accuracy_exposure.py`` recomputes it and checks
the file.  Schema: docs/formats.md, "Moffat slit table".
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

OUT = Path(__file__).resolve().parent / "moffat_slit.ecsv"


def table():
    """The astropy Table written to ``moffat_slit.ecsv``."""
    from astropy.table import Table

    from kncast.forecast import slit

    u = slit.moffat_grid()
    frac = slit.moffat_rectangle(u[:, None], u[None, :], slit.MOFFAT_BETA)
    hw, hl = np.meshgrid(u, u, indexing="ij")
    t = Table({"half_width_fwhm": hw.ravel(), "half_length_fwhm": hl.ravel(), "fraction": frac.ravel()})
    t["half_width_fwhm"].description = "half width of the rectangle across the slit, in FWHM"
    t["half_length_fwhm"].description = "half length of the rectangle along the slit, in FWHM"
    t["fraction"].description = "fraction of the Moffat PSF inside the rectangle"
    t.meta.update(description="Fraction of a centred circular Moffat PSF (I ~ (1 + r^2/a^2)^-beta, FWHM 1) "
                              "inside a centred rectangle; written by forecast/data/make_moffat_slit.py",
                  beta=slit.MOFFAT_BETA, grid={"start": slit.MOFFAT_GRID[0], "stop": slit.MOFFAT_GRID[1],
                                               "points": slit.MOFFAT_GRID[2], "spacing": "logarithmic"},
                  reference="Moffat 1969, A&A 3, 455")
    return t


if __name__ == "__main__":
    table().write(OUT, format="ascii.ecsv", overwrite=True)
    print(f"wrote {OUT}")
