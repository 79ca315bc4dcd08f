"""The semester forecast for target-of-opportunity proposals (``kncast semester``).

:mod:`.population` draws the simulated mergers and the expected counts, :mod:`.table` tabulates what
each setup measures per model realisation, phase and airmass, :mod:`.network` plans every simulated
event against the site network in chunks, :mod:`.run` strings them together, :mod:`.report` writes
the folder.
"""
