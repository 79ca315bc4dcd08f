"""kncast forecast: what will the spectrum of a kilonova candidate show, and how well can we measure it.

A physics library.  It knows nothing of sites, time zones or the command
line: callers pass airmass, Moon geometry and instrument objects in.
Internal units: wavelength in Angstrom (vacuum), time in days, flux density
in erg s^-1 cm^-2 A^-1, temperature in K.
"""
__all__: list[str] = []
