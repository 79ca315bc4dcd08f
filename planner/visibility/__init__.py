"""When and from where: ephemeris, root finder, nights, observing windows, candidates, sky coverage."""
