"""``simulate_semester``: the semester forecast from settings to numbers (no files).

Defaults, each with its source:

* rate interval of binary-neutron-star mergers 10-1700 Gpc^-3 yr^-1: the GWTC-3 population analysis
  (Abbott et al. 2023, Phys. Rev. X 13, 011048); the interval is quoted from memory (the project's
  reference notes mark it to be checked), and so are its credibility level and the population model;
* horizon 160 Mpc: the binary-neutron-star range planned for the fourth observing run of the two
  4-km detectors, 160-190 Mpc (Abbott et al. 2020, Living Rev. Relativ. 23, 3; from memory), its low
  end; used as a hard luminosity-distance limit, i.e. the range's sensitive volume;
* duty cycle 0.7: the fraction of time a detector network of the third observing run was taking
  science data (about 0.7-0.8 per detector; Abbott et al. 2020, Living Rev. Relativ. 23, 3; from memory);
* ejecta priors (photosphere model ``powerlaw``): mass log-uniform in 0.01-0.1 Msun and photospheric
  velocity at 1 d uniform in 0.1-0.3 c, the ranges reviewed by Metzger 2019 (Living Rev. Relativ. 23, 1;
  from memory); the other parameters keep the model's defaults (kncast.forecast.photosphere);
* detection: every diagnostic feature, ``sigma`` = 5 (kncast.forecast.defaults), 4 h per night and
  15 min overhead as ``kncast plan``; 7 nights as ``kncast plan``.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from kncast.planner.errors import ParameterError

DEFAULT_RATE = (10.0, 1700.0)   # Gpc^-3 yr^-1, GWTC-3 population analysis, PRX 13, 011048 (2023), from memory
DEFAULT_HORIZON_MPC = 160.0     # Abbott et al. 2020, Living Rev. Relativ. 23, 3 (O4 BNS range, low end), from memory
DEFAULT_DUTY = 0.7              # Abbott et al. 2020, Living Rev. Relativ. 23, 3 (O3 duty cycles), from memory
DEFAULT_MASS_MSUN = (0.01, 0.1)  # Metzger 2019, Living Rev. Relativ. 23, 1, from memory
DEFAULT_VELOCITY_C = (0.1, 0.3)  # Metzger 2019, Living Rev. Relativ. 23, 1, from memory
DEFAULT_EVENTS = 10_000
HORIZON_MAX_MPC = 600.0         # z = 0.12: the table's one spectral shape stays within 12 % of a trough width
DEFAULT_NIGHTS = 7
MODEL_REALISATIONS = 6          # ejecta draws tabulated; each merger takes one at random (a speed/prior-sampling choice)
PHASE_NODES = 20                # phase nodes of the table, log-spaced from FIRST_PHASE_D to the last night
FIRST_PHASE_D = 0.1
AIRMASS_NODES = (1.1, 1.3, 1.6, 2.0, 2.6, 3.5)  # a night uses the first node at or above its airmass
CHUNK_EVENTS = 250              # mergers per vectorised chunk (memory ~ 100 MB at 8 sites x 8 nights)
GRID_PHASES_D = tuple(float(d) for d in range(1, 11))
GRID_DISTANCES_MPC = (40.0, 60.0, 80.0, 100.0, 130.0, 160.0, 200.0, 250.0, 300.0)
GRID_HOURS = 1.0                # time on source of the proposal grid, h (a round block length; common practice)
GRID_AIRMASS = 1.2              # airmass of the proposal grid (the exposure model's default, forecast.exposure.Conditions)
EPHEMERIS_STEP_MIN = 360.0      # Sun table step: the Sun moves 0.25 deg in 6 h, linear interpolation errs < 1 arcsec
SEMESTER_DRAWS = 20_000         # Monte Carlo semesters for the median and 90 % interval (percentile noise < 1 %)


@dataclass
class Settings:
    start: object                  # datetime.date
    end: object
    sites: list
    horizon_mpc: float = DEFAULT_HORIZON_MPC
    duty: float = DEFAULT_DUTY
    rate: tuple = DEFAULT_RATE
    events: int = DEFAULT_EVENTS
    seed: int = 1
    nights: int = DEFAULT_NIGHTS
    sigma: float = 5.0
    max_hours: float = 4.0
    overhead_s: float = 900.0
    twilight: str = "nautical"
    max_airmass: float | None = None
    mass_msun: tuple = DEFAULT_MASS_MSUN
    velocity_c: tuple = DEFAULT_VELOCITY_C
    registry: object = None
    extra: dict = field(default_factory=dict)


def check(st: Settings) -> None:
    """Ranges of the settings (ParameterError naming the parameter: one line, exit 2)."""
    lo, hi = st.rate
    if not (np.isfinite(lo) and np.isfinite(hi) and 0.0 < lo <= hi <= 1e6):
        raise ParameterError("rate", f"{lo:g}" if lo == hi else f"{lo:g},{hi:g}", "a rate or LO,HI with 0 < LO <= HI <= 1e6 Gpc^-3 yr^-1")
    if not (np.isfinite(st.horizon_mpc) and 1.0 <= st.horizon_mpc <= HORIZON_MAX_MPC):
        raise ParameterError("horizon_mpc", st.horizon_mpc, f"a luminosity distance in [1, {HORIZON_MAX_MPC:g}] Mpc")
    if not (np.isfinite(st.duty) and 0.0 < st.duty <= 1.0):
        raise ParameterError("duty", st.duty, "a fraction in (0, 1]")
    if not st.end > st.start:
        raise ParameterError("end", str(st.end), f"a date after the start {st.start}")
    if (st.end - st.start).days > 3 * 366:
        raise ParameterError("end", str(st.end), "at most three years after the start")
    if not 1 <= int(st.events) <= 10_000_000:
        raise ParameterError("events", st.events, "a whole number from 1 to 10,000,000")
    if not st.sites:
        raise ParameterError("sites", "", "at least one site")
    for name, (a, b), top in (("mass_msun", st.mass_msun, 1.0), ("velocity_c", st.velocity_c, 0.34)):
        if not (np.isfinite(a) and np.isfinite(b) and 0.0 < a <= b <= top):
            raise ParameterError(name, f"{a:g},{b:g}", f"LO,HI with 0 < LO <= HI <= {top:g}")


def realisations(st: Settings, rng) -> list[dict]:
    """The ejecta draws: mass log-uniform, velocity uniform in their prior ranges (powerlaw model)."""
    m = np.exp(rng.uniform(np.log(st.mass_msun[0]), np.log(st.mass_msun[1]), MODEL_REALISATIONS))
    v = rng.uniform(st.velocity_c[0], st.velocity_c[1], MODEL_REALISATIONS)
    return [{"name": "powerlaw", "mass_msun": float(a), "velocity_ref_c": float(b)} for a, b in zip(m, v)]


def canonical_model() -> dict:
    """The canonical source of the proposal grid: the powerlaw model at its defaults."""
    return {"name": "powerlaw"}


def setup_refs(st: Settings) -> list:
    from kncast.planner.setups import all_setups
    from kncast.planner.sites import SiteRegistry

    registry = st.registry or SiteRegistry({s.id.lower(): s for s in st.sites})
    ids = {s.id for s in st.sites}
    return [r for r in all_setups(registry) if r.site.id in ids]


def simulate_semester(st: Settings, dask_address: str | None = None, progress=None) -> dict:
    """Simulate ``st.events`` mergers and plan each against ``st.sites``; returns the numbers of the report."""
    from kncast.forecast.photosphere import build_model
    from kncast.planner.semester import network, population
    from kncast.planner.semester.table import build_table
    from kncast.planner.visibility.nights import twilight_altitude_deg
    from kncast.planner.visibility.nights import mjd_of
    import datetime as dt

    check(st)
    say = progress or (lambda text: None)
    rng = np.random.default_rng(st.seed)
    start_mjd = mjd_of(dt.datetime.combine(st.start, dt.time(0), tzinfo=dt.timezone.utc))
    end_mjd = mjd_of(dt.datetime.combine(st.end, dt.time(0), tzinfo=dt.timezone.utc))
    refs = setup_refs(st)
    models = realisations(st, rng)
    pop = population.draw_population(rng, int(st.events), st.horizon_mpc, start_mjd, end_mjd, len(models))
    say("tables")
    sigma_kw = dict(sigma=st.sigma, bin_kms=1500.0, min_depth=0.1, telluric_threshold=_threshold())
    phases = np.geomspace(FIRST_PHASE_D, st.nights + 1.5, PHASE_NODES)
    ref_d = float(np.median(pop.distance_mpc))
    table = build_table([build_model(m) for m in models], refs, phases, np.array(AIRMASS_NODES), ref_d, **sigma_kw)
    say("ephemeris")
    from kncast.planner.visibility.sky import Ephemeris

    eph = Ephemeris.build(start_mjd - 1.0, end_mjd + st.nights + 3.0, [0.0], [0.0], step_min=EPHEMERIS_STEP_MIN)
    ns = network.NetworkSettings(
        site_lat=np.array([s.latitude_deg for s in st.sites], float),
        site_lon=np.array([s.longitude_deg for s in st.sites], float),
        site_min_alt=np.array([s.min_altitude_deg for s in st.sites], float),
        horizons=[s.horizon for s in st.sites],
        site_cols=[[c for c, r in enumerate(refs) if r.site.id == s.id] for s in st.sites],
        nights=int(st.nights), twilight_deg=twilight_altitude_deg(st.twilight), max_airmass=st.max_airmass,
        max_hours=float(st.max_hours), overhead_s=float(st.overhead_s), sigma=float(st.sigma))
    say("network")
    parts = run_chunks(pop, eph, table, ns, dask_address)
    per = {k: np.concatenate([p[k] for p in parts]) for k in parts[0]} if parts else {}
    say("grid")
    grid = proposal_grid(refs, sigma_kw)
    return summarise(st, refs, models, pop, per, grid, table, rng)


def _threshold() -> float:
    from kncast.forecast.defaults import CORRECTABLE_TRANSMISSION

    return CORRECTABLE_TRANSMISSION


def run_chunks(pop, eph, table, ns, dask_address=None) -> list:
    """Plan ``pop`` in chunks of CHUNK_EVENTS, here or on the Dask cluster at ``dask_address``."""
    from kncast.planner.semester.network import plan_chunk

    bounds = [(lo, min(lo + CHUNK_EVENTS, len(pop))) for lo in range(0, len(pop), CHUNK_EVENTS)]
    if dask_address is None:
        return [plan_chunk(pop.chunk(lo, hi), eph, table, ns) for lo, hi in bounds]
    from kncast.planner.semester.cluster import map_chunks

    return map_chunks(dask_address, [pop.chunk(lo, hi) for lo, hi in bounds], eph, table, ns)


def proposal_grid(refs, sigma_kw) -> dict:
    """Continuum S/N per velocity bin and significance of the best diagnostic feature, per setup x phase x
    distance, for the canonical source, GRID_HOURS on source at GRID_AIRMASS under a dark sky."""
    from kncast.forecast.ccd import snr_from_rates
    from kncast.forecast.defaults import DEFAULT_MAX_EXPOSURE_S
    from kncast.forecast.photosphere import build_model
    from kncast.planner.semester.table import build_table, significance

    phases = np.array(GRID_PHASES_D)
    dist = np.array(GRID_DISTANCES_MPC)
    tab = build_table([build_model(canonical_model())], refs, phases, np.array([GRID_AIRMASS]), 100.0, **sigma_kw)
    n_p, n_d, cols = phases.size, dist.size, np.arange(len(refs))
    p = np.broadcast_to(np.arange(n_p)[:, None], (n_p, n_d))
    zero = np.zeros((n_p, n_d), int)
    from kncast.forecast.distance import redshift_for_distance

    z = np.array([redshift_for_distance(d) for d in dist])  # nine grid distances
    scale = np.broadcast_to(((100.0 / dist) ** 2 * (1 + tab.ref_redshift) / (1 + z))[None, :], (n_p, n_d))
    t = GRID_HOURS * 3600.0
    sig = significance(tab, zero, p, zero, cols, scale, np.full((n_p, n_d), t))        # (P, D, F, C)
    best = sig.argmax(axis=-2)                                                           # (P, D, C)
    idx = lambda a: np.take_along_axis(a, best[..., None, :], -2)[..., 0, :]  # noqa: E731
    full = (zero[..., None, None], p[..., None, None], zero[..., None, None],
            np.arange(len(tab.feature_ids))[:, None], cols[None, :])
    nexp = max(1, int(np.ceil(t / DEFAULT_MAX_EXPOSURE_S - 1e-9)))
    snr_pix = snr_from_rates(t, nexp, tab.source[full] * scale[..., None, None], tab.n_pix[full], tab.sky[full],
                             tab.dark[full], tab.read_var[full])
    snr_bin = idx(np.where(tab.weight[full] > 0, snr_pix * np.sqrt(tab.ppb[full]), 0.0))
    feats = np.array(tab.feature_ids, dtype=object)[best]
    has = idx(sig) > 0
    return {"phase_d": phases, "distance_mpc": dist, "setup": [r.id for r in refs],
            "snr_bin": np.where(has, snr_bin, 0.0), "significance": idx(sig),
            "feature": np.where(has, feats, None), "hours": GRID_HOURS, "airmass": GRID_AIRMASS}


def summarise(st, refs, models, pop, per, grid, table, rng) -> dict:
    """Counts per merger, per site and setup, and the semester Monte Carlo."""
    from kncast.planner.semester import population

    credited = per["credited"]                                   # (E, S, N)
    epochs = (credited >= 0).sum(axis=(1, 2))
    duration_d = (st.end - st.start).days
    mean_per_rate = population.expected_mergers(1.0, st.horizon_mpc, duration_d, st.duty)
    mc = population.semester_counts(rng, st.rate[0], st.rate[1], mean_per_rate, epochs.astype(float), SEMESTER_DRAWS)
    by_setup = np.bincount(credited[credited >= 0].ravel(), minlength=len(refs))
    by_site = (credited >= 0).sum(axis=(0, 2))
    n = len(pop)
    hist = np.bincount(epochs, minlength=1)
    first = np.where((credited >= 0).any(axis=1), np.arange(st.nights)[None, :], st.nights).min(axis=1)
    return {"settings": st, "refs": refs, "models": models, "population": pop, "per": per, "grid": grid,
            "epochs_per_event": epochs, "epoch_histogram": hist, "first_useful_night": first,
            "by_setup": by_setup, "by_site": by_site, "n": n, "mean_per_rate": mean_per_rate,
            "duration_d": duration_d, "mc": mc, "table_ref_distance_mpc": table.ref_distance_mpc,
            "expected": {"gw_events": population.summary(mc["mergers"]), "events": population.summary(mc["events"]),
                         "useful_epochs": population.summary(mc["useful_epochs"])}}
