"""Prior probability that a star engulfed a planet recently enough to still show it.

The odds come from the star's own history.  A planet is captured by tides and
engulfed once its orbit lies inside the capture radius

    a_cap(t) = c(M_p) R_max(t),

where R_max(t) is the largest radius the star has had up to t (a planet that was
ever inside the capture radius is already gone).  Between (now - window) and now,
with window the signature's lifetime, the growing capture radius sweeps up the
orbits from a_cap,then to a_cap,now.  The expected number of planets of at least
the configured mass on those orbits, from the occurrence measured around
main-sequence stars (the progenitors), is ``planets_swept``; a small background of
planets delivered onto the star by planet-planet scattering or Kozai-Lidov cycles
adds ``N_bg = Gamma_dyn x window x N_all``.  With N = N_swept + N_bg,

    p_engulfed_history = 1 - exp(-N)      (Poisson: at least one engulfment).

On the main sequence the capture radius covers ultra-short periods only, where
giant planets are rare, so dwarfs get small odds dominated by the background; the
odds grow on the subgiant and giant branches, where the radius grows fast, and
with the window.  A red-clump star whose window does not reach back to the tip of
the giant branch sweeps nothing (its largest radius was at the tip) and keeps the
background only.

Occurrence of companions per unit ln P and ln M (:data:`POPULATIONS`):

    dN / (dln M dln P) = C M^alpha s(P) h(M_*, [Fe/H]),
    s(P) = (P / P_edge)^beta   for P >= P_edge,
           (P / P_edge)^gamma  for P <  P_edge   (the paucity of close-in planets),
    h    = (M_* / M_sun)^a_M 10^(a_Fe [Fe/H]),

normalised so that the integral over the published box (mass and period ranges of
the survey) at M_* = 1 M_sun, [Fe/H] = 0 is the published occurrence.  Periods and
separations are related by Kepler's third law for the star's mass
(:func:`orbital_period_days`).

Sources marked "verified" below were checked against the paper's abstract (the
numbers quoted); the journal volume and page of Silburt et al. 2015, Kunitomo et al.
2011, Gizis et al. 2001 and Wang & Fischer 2015 are from memory.

Everything here is a planning prior with order-of-magnitude accuracy: the
occurrence rates carry ~30 % errors, the capture factor ~50 %, the background rate
is a planning value good to a factor of a few.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from .constants import G_CGS, M_JUP_MSUN, M_SUN_G, R_SUN_CM
from .errors import ConfigError, PrioritizeError
from .lithium.deposition import M_EARTH_MJUP
from .stars.tracks import PHASE_EEPS

SECONDS_PER_DAY = 86400.0


class PlanetPopulation(NamedTuple):
    """A published companion population: dN/(dln M dln P) = C M^alpha s(P) h(M_*, [Fe/H]).

    Attributes
    ----------
    occurrence : float
        Companions per star inside the normalisation box (at M_* = 1 M_sun, [Fe/H] = 0).
    box_mass_mjup : tuple of float
        Mass range of the normalisation box (M_J).
    box_period_d : tuple of float
        Period range of the normalisation box (days).
    mass_range_mjup : tuple of float
        Masses the population covers (M_J); a threshold below the lower end counts
        only the population from the lower end up (smaller bodies are unmeasured).
    alpha : float
        Exponent of the mass distribution per ln M.
    beta : float
        Exponent of the period distribution per ln P above ``period_edge_d``.
    period_edge_d : float
        Period (days) below which the occurrence falls steeply.
    gamma : float
        Exponent of the period distribution per ln P below the edge.
    feh_exponent : float
        a_Fe in h = 10^(a_Fe [Fe/H]).
    host_mass_exponent : float
        a_M in h = (M_*/M_sun)^a_M.
    host_mass_range_msun : tuple of float
        Host masses over which the host-mass scaling was measured; outside, it is
        held at the nearer end.
    """

    occurrence: float
    box_mass_mjup: tuple
    box_period_d: tuple
    mass_range_mjup: tuple
    alpha: float
    beta: float
    period_edge_d: float
    gamma: float
    feh_exponent: float
    host_mass_exponent: float
    host_mass_range_msun: tuple


POPULATIONS = {
    # Giant planets.  Cumming et al. 2008, PASP 120, 531 (verified, abstract): dN =
    # C M^alpha P^beta dlnM dlnP with alpha = -0.31 +- 0.2, beta = 0.26 +- 0.1; 10.5 % of
    # solar-type stars have a planet of 0.3-10 M_J at P = 2-2000 d.  The power law is
    # extended to 13 M_J (the deuterium-burning limit).  Inside 2 d it falls as
    # (P/2 d)^6, so that fewer than 0.001 planets per star lie inside 2 d, the bound of
    # Howard et al. 2012, ApJS 201, 15 (verified, abstract) for R_p > 2 R_earth; the
    # exponent 6 is our choice within that bound.  With this shape the model gives
    # ~1.2 % within 10 d, the hot-Jupiter rate of Wright et al. 2012, ApJ 753, 160
    # (1.2 +- 0.38 %, verified, abstract).  Host scaling f ∝ M_* 10^(1.2 [Fe/H]) from
    # Johnson et al. 2010, PASP 122, 905 (verified, abstract; sample 0.2-1.9 M_sun, so
    # held outside 0.5-2.0 M_sun; occurrence turns over above ~2 M_sun, Reffert et
    # al. 2015, A&A 574, A116, from memory).
    "giant_planets": PlanetPopulation(
        occurrence=0.105, box_mass_mjup=(0.3, 10.0), box_period_d=(2.0, 2000.0),
        mass_range_mjup=(0.3, 13.0), alpha=-0.31, beta=0.26, period_edge_d=2.0, gamma=6.0,
        feh_exponent=1.2, host_mass_exponent=1.0, host_mass_range_msun=(0.5, 2.0)),
    # Brown dwarfs in the desert.  Grether & Lineweaver 2006, ApJ 640, 1051 (verified,
    # abstract): < 1 % of Sun-like stars have a brown-dwarf companion with P < 5 yr;
    # 0.5 % in the desert (Gizis et al. 2001, ApJ 551, L163, verified, abstract).  Flat
    # in ln M and ln P, with the giant planets' inner edge, and no host scaling
    # (planning choices, from memory).
    "brown_dwarfs": PlanetPopulation(
        occurrence=0.005, box_mass_mjup=(13.0, 80.0), box_period_d=(2.0, 1826.0),
        mass_range_mjup=(13.0, 80.0), alpha=0.0, beta=0.0, period_edge_d=2.0, gamma=6.0,
        feh_exponent=0.0, host_mass_exponent=0.0, host_mass_range_msun=(0.5, 2.0)),
    # Small planets (1-4 R_earth: Earths, super-Earths, sub-Neptunes, masses ~1-20
    # M_earth).  Silburt, Gaidos & Wu 2015, ApJ 799, 180 (verified, abstract): 0.46 +-
    # 0.03 planets per star on 20-200 d orbits, uniform in log P; ~0.66 including
    # planets inside 20 d.  The fall-off inside 10 d as P^2 is from memory (Howard et
    # al. 2012 fit a cut-off near 7 d with an exponent ~2-2.6); it gives ~0.70 per
    # star in all.  Flat in ln M (from memory; the radius distribution is flat below 2
    # R_earth, Petigura et al. 2013, ApJ 770, 69, verified, abstract); no host scaling
    # (the metallicity dependence of small planets is weak, Wang & Fischer 2015, AJ
    # 149, 14, verified, abstract).
    "small_planets": PlanetPopulation(
        occurrence=0.46, box_mass_mjup=(1.0 * M_EARTH_MJUP, 20.0 * M_EARTH_MJUP),
        box_period_d=(20.0, 200.0), mass_range_mjup=(1.0 * M_EARTH_MJUP, 20.0 * M_EARTH_MJUP),
        alpha=0.0, beta=0.0, period_edge_d=10.0, gamma=2.0, feh_exponent=0.0,
        host_mass_exponent=0.0, host_mass_range_msun=(0.5, 2.0)),
}
"""The companion populations, each with its published normalisation (see comments)."""

KIND_POPULATIONS = {
    "gas_giant": ("giant_planets", "brown_dwarfs"),
    "brown_dwarf": ("giant_planets", "brown_dwarfs"),
    "rocky": ("small_planets",),
}
"""Populations counted for each planet kind.  Gas giants and brown dwarfs carry the
same lithium per unit mass, so a companion of at least the configured mass from
either population leaves at least the configured signature; a rocky planet carries
far more lithium per unit mass than a giant, so only small planets count for it."""

CAPTURE_FACTOR_1MJ = 2.0
"""c for a 1 M_J planet: a_cap = c R_max.  Tidal capture radii of ~300 R_sun (1.4 AU)
for a 1.5 M_sun star (Madappatt Alikutty et al. 2011, arXiv:1102.0513, verified,
abstract) against the 157 R_sun tip of our 1.5 M_sun track, and survival limits above
1 AU below ~2 M_sun and ~0.2 AU above (Kunitomo et al. 2011, ApJ 737, 66, verified,
abstract; our 1 and 2.5 M_sun tips, 188 and 36 R_sun, give 1.7 and 0.33 AU).
Villaver & Livio 2009, ApJ 705, L81 find capture out to a few stellar radii (from
memory)."""
CAPTURE_MASS_EXPONENT = 1.0 / 8.0
"""c ∝ M_p^(1/8): the equilibrium tide of a convective envelope shrinks the orbit as
d ln a/dt ∝ -(M_p/M_*) (R/a)^8 (Zahn 1977, A&A 57, 383; Verbunt & Phinney 1995, A&A
296, 709; from memory), so the orbit that just decays within the star's evolution
scales as a ∝ M_p^(1/8) R.  Engulfment depends strongly on planet mass (Villaver et
al. 2014, ApJ 794, 3, verified, abstract)."""
DYNAMICAL_DELIVERY_PER_GYR = 0.01
"""Gamma_dyn: fraction of a star's companions (those of the population's normalisation
box) delivered onto the star per Gyr by planet-planet scattering and Kozai-Lidov cycles
at late times.  Planning value, from memory: scattering sends a few % of unstable
giant-planet systems into the star (Chatterjee et al. 2008, ApJ 686, 580) and
high-eccentricity migration in binaries disrupts a comparable share (Anderson, Storch
& Lai 2016, MNRAS 456, 3671), over Gyr; uncertain by a factor of a few."""


def orbital_period_days(a_rsun, m_total_msun):
    """Orbital period from Kepler's third law.

    P = 2 pi sqrt(a^3 / (G M_tot)).

    Parameters
    ----------
    a_rsun : array_like
        Semi-major axis (R_sun, IAU 2015 nominal).
    m_total_msun : array_like
        Star + planet mass (M_sun, IAU 2015 nominal G M_sun).

    Returns
    -------
    ndarray
        Period (days of 86400 s); NaN where a mass is not positive.
    """
    a_cm = np.asarray(a_rsun, dtype=float) * R_SUN_CM
    gm = np.asarray(m_total_msun, dtype=float) * M_SUN_G * G_CGS
    with np.errstate(invalid="ignore", divide="ignore"):
        period_s = 2.0 * np.pi * np.sqrt(a_cm ** 3 / np.where(gm > 0, gm, np.nan))
    return period_s / SECONDS_PER_DAY


def capture_factor(planet_mass_mjup):
    """Tidal capture radius in units of the star's largest radius so far.

    c = max(1, c_1 (M_p / M_J)^(1/8)), c_1 = :data:`CAPTURE_FACTOR_1MJ` = 2.0; the
    exponent is :data:`CAPTURE_MASS_EXPONENT`.  Gives 2.0 for 1 M_J, 2.7 for 10 M_J,
    3.4 for 80 M_J and 1.3 for a 10 M_earth planet; never below 1 (a planet inside
    the star is engulfed).  Calibrated on the giant branch of 1-2.5 M_sun stars; it
    is used on the main sequence too, where it only covers periods below ~0.5 d.

    Parameters
    ----------
    planet_mass_mjup : array_like
        Planet mass (M_J), positive.

    Returns
    -------
    ndarray
        c (dimensionless).
    """
    m = np.asarray(planet_mass_mjup, dtype=float)
    return np.maximum(1.0, CAPTURE_FACTOR_1MJ * m ** CAPTURE_MASS_EXPONENT)


def _log_integral(k, x):
    """Integral of exp(k u) du from 0 to x (x for k = 0)."""
    return x if k == 0.0 else np.expm1(k * x) / k


def _mass_integral(pop, m_lo, m_hi):
    """Integral of M^alpha dln M between the masses, clipped to the population's range."""
    lo, hi = pop.mass_range_mjup
    m1 = np.clip(m_lo, lo, hi)
    m2 = np.clip(m_hi, lo, hi)
    return np.maximum(_log_integral(pop.alpha, np.log(m2)) - _log_integral(pop.alpha, np.log(m1)), 0.0)


def _period_integral(pop, p_lo, p_hi):
    """Integral of s(P) dln P between the periods (s = 1 at the edge, see the module notes)."""
    def antiderivative(p):
        with np.errstate(divide="ignore"):
            x = np.log(np.asarray(p, dtype=float) / pop.period_edge_d)
        return np.where(x >= 0, _log_integral(pop.beta, np.maximum(x, 0.0)),
                        _log_integral(pop.gamma, np.minimum(x, 0.0)))
    return np.maximum(antiderivative(p_hi) - antiderivative(p_lo), 0.0)


def population_count(pop, p_lo_d, p_hi_d, m_lo_mjup, m_hi_mjup, host_mass_msun, feh):
    """Expected number of a population's companions per star in a period and mass range.

    N = f_box [I_M(m_lo, m_hi) / I_M(box)] [I_P(p_lo, p_hi) / I_P(box)] h(M_*, [Fe/H]),
    with I_M = integral of M^alpha dln M (masses clipped to the population's range),
    I_P = integral of s(P) dln P (module notes), h = (M_*/M_sun)^a_M 10^(a_Fe [Fe/H])
    (M_* held inside the population's host-mass range) and f_box the published
    occurrence in the normalisation box (:class:`PlanetPopulation`).

    Parameters
    ----------
    pop : PlanetPopulation
        One of :data:`POPULATIONS`.
    p_lo_d, p_hi_d : array_like
        Period range (days); an empty range (p_hi <= p_lo) gives 0.
    m_lo_mjup, m_hi_mjup : array_like
        Mass range (M_J).
    host_mass_msun : array_like
        Host mass (M_sun).
    feh : array_like
        Host [Fe/H] (dex); the scalings were measured for about -0.6 to +0.5.

    Returns
    -------
    ndarray
        Companions per star (broadcast shape); NaN where an input is NaN.
    """
    shape = _mass_integral(pop, *pop.box_mass_mjup) * _period_integral(pop, *pop.box_period_d)
    host = np.clip(np.asarray(host_mass_msun, dtype=float), *pop.host_mass_range_msun)
    scale = host ** pop.host_mass_exponent * 10.0 ** (pop.feh_exponent * np.asarray(feh, dtype=float))
    return (pop.occurrence * scale * _mass_integral(pop, m_lo_mjup, m_hi_mjup)
            * _period_integral(pop, p_lo_d, p_hi_d) / shape)


def companions_per_star(p_lo_d, p_hi_d, planet_mass_mjup, host_mass_msun, feh, planet_kind="gas_giant"):
    """Expected number of companions of at least a mass per star in a period range.

    N(>= M_p; p_lo..p_hi) = sum over the kind's populations (:data:`KIND_POPULATIONS`)
    of :func:`population_count` from M_p to the population's upper mass.

    Parameters
    ----------
    p_lo_d, p_hi_d : array_like
        Period range (days).
    planet_mass_mjup : array_like
        Mass threshold (M_J).
    host_mass_msun : array_like
        Host mass (M_sun).
    feh : array_like
        Host [Fe/H] (dex).
    planet_kind : {"gas_giant", "brown_dwarf", "rocky"}

    Returns
    -------
    ndarray
        Companions per star.
    """
    pops = _populations(planet_kind, "companions_per_star")
    return sum(population_count(POPULATIONS[name], p_lo_d, p_hi_d, planet_mass_mjup,
                                POPULATIONS[name].mass_range_mjup[1], host_mass_msun, feh)
               for name in pops)


def _populations(planet_kind, func):
    if planet_kind not in KIND_POPULATIONS:
        raise ConfigError(f"{func}: planet kind must be one of {sorted(KIND_POPULATIONS)}; "
                          f"got {planet_kind!r}")
    return KIND_POPULATIONS[planet_kind]


class EngulfmentOdds(NamedTuple):
    """The engulfment prior of each star (arrays of the broadcast input shape).

    Attributes
    ----------
    p_engulfed_history : ndarray
        1 - exp(-(planets_swept + N_bg)), in [0, 1).
    planets_swept : ndarray
        Expected number of companions of at least the planet mass whose orbits the
        capture radius swept up in the window (before the background).
    capture_radius_now_rsun, capture_radius_then_rsun : ndarray
        c R_max now and one window ago (R_sun).
    period_swept_min_d, period_swept_max_d : ndarray
        Orbital periods at the two capture radii (days): the swept range.
    p_background : ndarray
        The part of p_engulfed_history due to dynamically delivered planets,
        p N_bg / (planets_swept + N_bg) (0 when both are 0).
    """

    p_engulfed_history: np.ndarray
    planets_swept: np.ndarray
    capture_radius_now_rsun: np.ndarray
    capture_radius_then_rsun: np.ndarray
    period_swept_min_d: np.ndarray
    period_swept_max_d: np.ndarray
    p_background: np.ndarray


def engulfment_probability(r_max_now_rsun, r_max_then_rsun, window_myr, mass_msun, feh,
                           planet_mass_mjup, planet_kind="gas_giant"):
    """Prior probability that the star engulfed a planet of at least M_p within the window.

    a_cap = c(M_p) R_max (c from :func:`capture_factor`), now and one window ago;
    P_min, P_max = Kepler periods at a_cap,then and a_cap,now for M_* + M_p
    (:func:`orbital_period_days`);

        N_swept = N(>= M_p; P_min..P_max)                         (:func:`companions_per_star`)
        N_bg    = Gamma_dyn (window / 1000 Myr) N(>= M_p; whole box of each population)
        p       = 1 - exp(-(N_swept + N_bg)),

    with Gamma_dyn = :data:`DYNAMICAL_DELIVERY_PER_GYR` = 0.01 Gyr^-1.  N counts the
    companions measured around main-sequence stars (the progenitor's population); the
    host mass and [Fe/H] scale it (Johnson et al. 2010 for giant planets).  Any
    window > 0 gives p > 0.  Periods use the given (present) mass; the orbits'
    adiabatic widening by mass loss (a ∝ 1/M_*) is ignored (< 20 % in a before the
    clump, within the capture factor's error).

    Parameters
    ----------
    r_max_now_rsun, r_max_then_rsun : array_like
        Largest radius so far, now and one window ago (R_sun), e.g. from
        :func:`radius_history`; then <= now.
    window_myr : array_like
        The signature's lifetime (Myr), >= 0.
    mass_msun : array_like
        Present stellar mass (M_sun).
    feh : array_like
        Stellar [Fe/H] (dex).
    planet_mass_mjup : float or array_like
        Least planet mass that leaves the signature (M_J), positive.
    planet_kind : {"gas_giant", "brown_dwarf", "rocky"}
        Which populations count (:data:`KIND_POPULATIONS`).

    Returns
    -------
    EngulfmentOdds
        NaN in every field where an input is NaN, a radius or mass is not positive,
        r_max_then > r_max_now, or the window is negative.

    Raises
    ------
    ConfigError
        If the planet kind is unknown or the planet mass is not a positive number.

    References
    ----------
    Cumming et al. 2008, PASP 120, 531; Wright et al. 2012, ApJ 753, 160; Johnson et
    al. 2010, PASP 122, 905; Grether & Lineweaver 2006, ApJ 640, 1051; Silburt, Gaidos
    & Wu 2015, ApJ 799, 180; Villaver & Livio 2009, ApJ 705, L81; Kunitomo et al.
    2011, ApJ 737, 66 (see :data:`POPULATIONS` and the module constants).
    """
    func = "engulfment_probability"
    pops = _populations(planet_kind, func)
    m_p = np.asarray(planet_mass_mjup, dtype=float)
    if np.any(~(np.isfinite(m_p) & (m_p > 0))):
        raise ConfigError(f"{func}: the planet mass must be a positive number of Jupiter masses; "
                          f"got {planet_mass_mjup!r}")
    r_now, r_then, window, mass, feh, m_p = np.broadcast_arrays(
        *(np.asarray(v, dtype=float) for v in (r_max_now_rsun, r_max_then_rsun, window_myr,
                                               mass_msun, feh, m_p)))
    with np.errstate(invalid="ignore"):
        good = ((r_then > 0) & (r_now >= r_then) & (window >= 0) & (mass > 0) & np.isfinite(feh)
                & np.isfinite(r_now))
    c = capture_factor(m_p)
    cap_now, cap_then = c * r_now, c * r_then
    m_total = mass + m_p * M_JUP_MSUN
    p_min, p_max = orbital_period_days(cap_then, m_total), orbital_period_days(cap_now, m_total)
    swept = companions_per_star(p_min, p_max, m_p, mass, feh, planet_kind)
    whole = sum(population_count(POPULATIONS[n], *POPULATIONS[n].box_period_d, m_p,
                                 POPULATIONS[n].mass_range_mjup[1], mass, feh) for n in pops)
    background = DYNAMICAL_DELIVERY_PER_GYR * window / 1000.0 * whole
    total = swept + background
    p = -np.expm1(-total)
    with np.errstate(invalid="ignore", divide="ignore"):
        p_bg = np.where(total > 0, p * background / total, 0.0)

    def masked(values):
        return np.where(good, values, np.nan)

    return EngulfmentOdds(masked(p), masked(swept), masked(cap_now), masked(cap_then),
                          masked(p_min), masked(p_max), masked(p_bg))


LANDMARK_EEPS = np.array([stop - 1 for _, stop in PHASE_EEPS.values()], dtype=float)
"""Last EEP of each phase (end of the main sequence, of the subgiant branch, the tip of
the giant branch, end of core-He burning): where the radius peaks within a phase."""


def radius_history(grid, mass, z, eep, window_myr, n_nodes=48):
    """Largest radius along the star's own track, now and one window ago.

    R_max(e) = max of R over the interpolated track from the ZAMS (EEP 0) to EEP e,
    evaluated on ``n_nodes`` EEPs uniformly spaced in [0, e_now] plus the last EEP of
    each phase below e (:data:`LANDMARK_EEPS`: the radius peaks at the end of the
    main sequence and at the tip of the giant branch) plus e itself.  The past point
    is e_then = EEP where the track reaches age_now - window
    (:meth:`~prioritize.stars.tracks.TrackGrid.eep_at_age`), or the ZAMS if the window
    reaches before it; R_max,then uses the same nodes up to e_then and is capped at
    R_max,now (R_max never decreases).  Between nodes the sampled maximum can miss a
    local peak by the change of R over one node spacing (~e/47 EEPs) where R is not
    monotonic (the main-sequence hook, the blue loop).

    Parameters
    ----------
    grid : TrackGrid
        Track grid (:func:`prioritize.stars.tracks.load_grid`).
    mass : array_like, shape (n,)
        Initial mass (M_sun).
    z : array_like, shape (n,)
        Metal mass fraction.
    eep : array_like, shape (n,)
        Present fractional EEP (layout :data:`~prioritize.stars.tracks.PHASE_EEPS`).
    window_myr : array_like, shape (n,) or scalar
        Look-back time (Myr), >= 0.
    n_nodes : int
        Uniform nodes per star (>= 2); memory ~ n x (n_nodes + 4) floats per column.

    Returns
    -------
    r_max_now_rsun, r_max_then_rsun : ndarray, shape (n,)
        R_sun; NaN where the point is off the grid, an input is NaN, or the window is
        negative (then only).

    Raises
    ------
    PrioritizeError
        If ``n_nodes`` < 2 (a programming error).
    """
    if int(n_nodes) != n_nodes or n_nodes < 2:
        raise PrioritizeError(f"radius_history: n_nodes must be an integer >= 2; got {n_nodes!r}")
    mass, z, eep, window = (np.ravel(a) for a in np.broadcast_arrays(
        *(np.asarray(v, dtype=float) for v in (mass, z, eep, window_myr))))
    now = grid.interpolate(mass, z, eep, columns=["age_myr", "logr"])
    age_then = now["age_myr"] - window
    with np.errstate(invalid="ignore"):
        before_zams = age_then <= 0
        eep_then = np.where(before_zams, 0.0, grid.eep_at_age(mass, z, np.where(before_zams, 0.0, age_then)))
        eep_then = np.where(window >= 0, eep_then, np.nan)
    nodes = np.concatenate([eep[:, None] * np.linspace(0.0, 1.0, int(n_nodes))[None, :],
                            np.minimum(LANDMARK_EEPS[None, :], eep[:, None])], axis=1)
    logr_nodes = grid.interpolate(mass[:, None], z[:, None], nodes, columns=["logr"])["logr"]
    logr_then = grid.interpolate(mass, z, eep_then, columns=["logr"])["logr"]
    with np.errstate(invalid="ignore"):
        up_to_then = np.where(nodes <= eep_then[:, None], logr_nodes, -np.inf)
    log_max_now = np.fmax(np.fmax.reduce(logr_nodes, axis=1), now["logr"])
    log_max_now = np.where(np.isfinite(now["logr"]), log_max_now, np.nan)
    log_max_then = np.minimum(np.fmax(np.max(up_to_then, axis=1), logr_then), log_max_now)
    log_max_then = np.where(np.isfinite(logr_then), log_max_then, np.nan)
    return 10.0 ** log_max_now, 10.0 ** log_max_then
