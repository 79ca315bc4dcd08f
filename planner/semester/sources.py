"""Published sources of the semester forecast's defaults, as data (kncast.forecast.references.Citation)."""
from __future__ import annotations

from kncast.forecast.references import ASTROPY_2022, METZGER_2019, PLANCK_2018, Citation

GWTC3_POPULATION_2023 = Citation("Abbott et al. (LIGO, Virgo and KAGRA Collaborations)", 2023, "Phys. Rev. X", "13",
                                 "011048", "binary-neutron-star merger rate interval 10-1700 Gpc^-3 yr^-1; "
                                 "the interval, its credibility level and population model quoted from memory")
OBSERVING_PROSPECTS_2020 = Citation("Abbott et al. (KAGRA, LIGO and Virgo Collaborations)", 2020,
                                    "Living Rev. Relativ.", "23", "3", "planned binary-neutron-star ranges "
                                    "(160-190 Mpc for the fourth run) and duty cycles; from memory")

REFERENCES = (GWTC3_POPULATION_2023, OBSERVING_PROSPECTS_2020, PLANCK_2018, ASTROPY_2022, METZGER_2019)
