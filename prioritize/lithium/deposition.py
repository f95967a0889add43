"""How much of an engulfed planet ends up in the star's convective envelope (planning estimates).

A planet spiralling into its star either dissolves in the convective envelope, where
its lithium mixes to the surface, or reaches the convective base (mostly) intact and
is lost to the surface lithium budget (Jia & Spruit 2018, ApJ 864, 169; Siess & Livio
1999, MNRAS 304, 925).  Three scenarios:

``full``
    all the planet's material reaches the envelope (the upper bound).
``ram-pressure``
    Jia & Spruit (2018): the planet is disrupted where the ram pressure of the
    stellar gas reaches its binding pressure, rho_*(r) v_orb(r)^2 >= C rho_p v_esc^2.
    Disrupted above the convective base: all of it is deposited.  Reaching the base
    intact: only the layers stripped on the way are (:func:`stripped_fraction`).
``virial``
    Siess & Livio (1999): the planet dissolves where the stellar temperature reaches
    its virial temperature.  All or nothing (see :func:`virial_deposited_fraction`).

Envelope profiles are arrays whose last axis runs from the photosphere (index 0)
inward to the convective base (last finite index), as the envelope integration
writes them (``profile_r_rsun``, ``profile_rho_gcc``, ``profile_t_k``,
``profile_m_msun``); leading axes are stars.  Planet masses are in Jupiter masses
(1 M_J = 9.546e-4 M_sun); rocky planets of 1 M_earth are 3.147e-3 M_J.
"""

from __future__ import annotations

import numpy as np

from ..constants import (G_CGS, K_B_CGS, M_EARTH_MSUN, M_H_CGS, M_JUP_MSUN, M_SUN_G,
                         R_EARTH_CM, R_JUP_CM, R_SUN_CM)
from ..errors import ConfigError, ModelRangeError, PrioritizeError
from .burning import _positive
from .enrichment import GAS_KINDS

PLANET_KINDS = GAS_KINDS + ("rocky",)
SCENARIOS = ("full", "ram-pressure", "virial")

M_EARTH_MJUP = M_EARTH_MSUN / M_JUP_MSUN
# Mass ranges (M_J) where each kind's radius law is used.
PLANET_MASS_RANGE_MJUP = {
    "gas_giant": (0.3, 13.0),
    "brown_dwarf": (13.0, 80.0),
    "rocky": (0.1 * M_EARTH_MJUP, 20.0 * M_EARTH_MJUP),
}
EARTH_CORE_MASS_FRACTION = 0.325    # Earth's iron core mass fraction (from memory)
ROCKY_RADIUS_EXPONENT = 1.0 / 3.7   # Zeng, Sasselov & Jacobsen 2016, ApJ 819, 127
MU_PLANET = 1.3                     # molecular/neutral H2-He gas (Siess & Livio 1999)
DISRUPTION_STRENGTH = 1.0           # C in rho v^2 >= C rho_p v_esc^2 (order unity)


def _mass_mjup(mass_mjup, func: str) -> np.ndarray:
    arr = np.asarray(mass_mjup, dtype=float)
    if np.any(~(np.isfinite(arr) & (arr > 0))):
        raise ConfigError(f"{func}: the planet mass must be a positive number of Jupiter "
                          f"masses; got {mass_mjup!r}")
    return arr


def _mass_g_and_radius(mass_mjup, radius_cm, func: str):
    """Planet mass in grams and radius in cm, both checked."""
    mass_g = _mass_mjup(mass_mjup, func) * M_JUP_MSUN * M_SUN_G
    return mass_g, _positive("radius_cm", func, radius_cm)


def planet_radius_cm(mass_mjup, kind):
    """Radius of a planet or brown dwarf from its mass.

    - ``gas_giant`` (0.3-13 M_J) and ``brown_dwarf`` (13-80 M_J): R = 1 R_J.  Cold
      hydrogen bodies have nearly mass-independent radii over this range (electron
      degeneracy balances Coulomb forces, R ~ M^-0.04 for Jovian worlds); old brown
      dwarfs are 0.8-1.0 R_J and inflated hot Jupiters 1.2-1.9 R_J.
    - ``rocky`` (0.1-20 M_earth): R = (1.07 - 0.21 CMF) R_earth (M/M_earth)^(1/3.7)
      with Earth's core mass fraction CMF = 0.325, i.e. R ~ M^0.27.  The relation is
      fitted to 1-8 M_earth and CMF 0-0.4; below and above it is extrapolated
      (Mars, 0.107 M_earth: 0.548 vs 0.532 R_earth).

    Parameters
    ----------
    mass_mjup : array_like
        Mass in Jupiter masses.
    kind : {"gas_giant", "brown_dwarf", "rocky"}

    Returns
    -------
    ndarray
        Radius in cm.

    Raises
    ------
    ConfigError
        Unknown kind or non-positive mass.
    ModelRangeError
        Mass outside the kind's range (Neptune-class planets, 20 M_earth - 0.3 M_J,
        are not modelled).

    References
    ----------
    Zeng, L., Sasselov, D. D. & Jacobsen, S. B. 2016, ApJ 819, 127 (rocky).
    Chen, J. & Kipping, D. 2017, ApJ 834, 17 (Jovian worlds, R ~ M^-0.04; from memory).
    Burrows, A. et al. 2001, Rev. Mod. Phys. 73, 719 (brown dwarf radii; from memory).
    """
    if kind not in PLANET_KINDS:
        raise ConfigError(f"planet kind must be one of {', '.join(PLANET_KINDS)}; got {kind!r}")
    mass = _mass_mjup(mass_mjup, "planet_radius_cm")
    low, high = PLANET_MASS_RANGE_MJUP[kind]
    if np.any((mass < low * (1 - 1e-9)) | (mass > high * (1 + 1e-9))):
        raise ModelRangeError(f"planet_radius_cm: a {kind} must have {low:.3g}-{high:.3g} M_J "
                              f"({low / M_EARTH_MJUP:.3g}-{high / M_EARTH_MJUP:.4g} M_earth); got "
                              f"{mass_mjup!r}. Use kind 'rocky' up to 20 M_earth, 'gas_giant' "
                              "from 0.3 M_J")
    if kind in GAS_KINDS:
        return np.full_like(mass, R_JUP_CM)
    prefactor = 1.07 - 0.21 * EARTH_CORE_MASS_FRACTION
    return prefactor * R_EARTH_CM * (mass / M_EARTH_MJUP) ** ROCKY_RADIUS_EXPONENT


def planet_mean_density(mass_mjup, radius_cm):
    """Mean density rho_p = 3 M_p / (4 pi R_p^3), in g cm^-3.

    Parameters
    ----------
    mass_mjup : array_like
        Mass in Jupiter masses.
    radius_cm : array_like
        Radius (cm), e.g. from :func:`planet_radius_cm`.

    Returns
    -------
    ndarray
        g cm^-3 (Jupiter 1.326).

    References
    ----------
    Mean densities of the solar-system planets from memory (Jupiter 1.326 g cm^-3).
    """
    mass_g, radius = _mass_g_and_radius(mass_mjup, radius_cm, "planet_mean_density")
    return 3.0 * mass_g / (4.0 * np.pi * radius ** 3)


def escape_velocity(mass_mjup, radius_cm):
    """Surface escape velocity v_esc = (2 G M_p / R_p)^(1/2), in cm s^-1.

    Parameters
    ----------
    mass_mjup, radius_cm : array_like
        As for :func:`planet_mean_density`.

    Returns
    -------
    ndarray
        cm s^-1 (Jupiter 60.2 km s^-1).

    References
    ----------
    Any mechanics text; Jia & Spruit 2018, ApJ 864, 169 use it in the disruption criterion.
    """
    mass_g, radius = _mass_g_and_radius(mass_mjup, radius_cm, "escape_velocity")
    return np.sqrt(2.0 * G_CGS * mass_g / radius)


def disruption_pressure(mass_mjup, radius_cm, strength=DISRUPTION_STRENGTH):
    """Ram pressure that disrupts a planet, P_d = C rho_p v_esc^2, in erg cm^-3.

    rho_p v_esc^2 = (3 / 2 pi) G M_p^2 / R_p^4, four times the central pressure of a
    uniform-density sphere.  For Jupiter: 4.8e13 erg cm^-3 (G M^2/R^4 = 1.0e14).

    Parameters
    ----------
    mass_mjup, radius_cm : array_like
        As for :func:`planet_mean_density`.
    strength : float
        The order-unity factor C (default 1; Jia & Spruit give the criterion up to
        such a factor, and compression by the ram pressure delays disruption, which a
        C > 1 mimics).

    Returns
    -------
    ndarray
        erg cm^-3.

    References
    ----------
    Jia, S. & Spruit, H. C. 2018, ApJ 864, 169.
    """
    if not strength > 0:
        raise ConfigError(f"disruption strength C must be > 0; got {strength!r}")
    return (strength * planet_mean_density(mass_mjup, radius_cm)
            * escape_velocity(mass_mjup, radius_cm) ** 2)


def orbital_velocity(r_rsun, enclosed_mass_msun):
    """Circular orbital velocity v_orb = (G m(r) / r)^(1/2) inside the star, in cm s^-1.

    Parameters
    ----------
    r_rsun : array_like
        Radius (R_sun).
    enclosed_mass_msun : array_like
        Mass inside r (M_sun).

    Returns
    -------
    ndarray
        cm s^-1 (437 km s^-1 at 1 R_sun around 1 M_sun).

    References
    ----------
    Newtonian circular orbit (any mechanics text).
    """
    r_cm = _positive("r_rsun", "orbital_velocity", r_rsun) * R_SUN_CM
    m_g = _positive("enclosed_mass_msun", "orbital_velocity", enclosed_mass_msun) * M_SUN_G
    return np.sqrt(G_CGS * m_g / r_cm)


def virial_temperature(mass_mjup, radius_cm, mu=MU_PLANET):
    """Virial temperature of a planet, T_vir = G M_p mu m_H / (k R_p), in K.

    Parameters
    ----------
    mass_mjup, radius_cm : array_like
        As for :func:`planet_mean_density`.
    mu : float
        Mean molecular weight of the planet's material: 1.3 for molecular/neutral
        H2 + He (default), 0.6 if taken as ionised.

    Returns
    -------
    ndarray
        K (Jupiter: 2.9e5 K at mu = 1.3, 1.3e5 K at mu = 0.6).

    References
    ----------
    Siess, L. & Livio, M. 1999, MNRAS 304, 925 and 308, 1133.
    """
    mass_g, radius = _mass_g_and_radius(mass_mjup, radius_cm, "virial_temperature")
    return G_CGS * mass_g * mu * M_H_CGS / (K_B_CGS * radius)


def _profile(r_rsun, values, name: str, func: str):
    """Radius and a second profile as float arrays of one shape (..., k), k >= 2."""
    r = _positive("r_rsun", func, r_rsun)
    v = _positive(name, func, values)
    if r.ndim == 0 or r.shape[-1] < 2 or v.shape != r.shape:
        raise PrioritizeError(f"{func}: r_rsun and {name} must be profiles of one shape (..., k) "
                              f"with k >= 2 points; got {r.shape} and {v.shape}")
    return r, v


def _enclosed_mass(enclosed_mass_msun, r: np.ndarray, func: str) -> np.ndarray:
    """m(r) on the profile: given per point (same shape) or as one mass per star (...,)."""
    m = _positive("enclosed_mass_msun", func, enclosed_mass_msun)
    if m.ndim == r.ndim - 1:
        m = m[..., None]
    return np.broadcast_to(m, r.shape)


def first_crossing_radius(r_rsun, ratio):
    """Outermost radius of a profile where ``ratio`` first reaches 1.

    Scans from the photosphere (index 0) inward and interpolates ln(ratio) linearly in
    ln r between the last point below 1 and the first at or above it (exact for a
    power law in r).

    Parameters
    ----------
    r_rsun : ndarray, shape (..., k)
        Radii, outermost first.
    ratio : ndarray, shape (..., k)
        Criterion over its threshold (positive); NaN entries never count as reached.

    Returns
    -------
    ndarray, shape (...)
        Radius (R_sun); r[..., 0] if the criterion already holds at the photosphere,
        NaN if it never holds along the profile.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.log(ratio)
    reached = q >= 0
    any_reached = reached.any(axis=-1)
    j = np.argmax(reached, axis=-1)[..., None]
    jm = np.maximum(j - 1, 0)
    ln_r = np.log(r_rsun)
    q0, q1 = (np.take_along_axis(q, i, axis=-1)[..., 0] for i in (jm, j))
    r0, r1 = (np.take_along_axis(ln_r, i, axis=-1)[..., 0] for i in (jm, j))
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(q1 > q0, -q0 / (q1 - q0), 0.0)
    ln_cross = np.where(j[..., 0] == 0, r0, r0 + np.clip(frac, 0.0, 1.0) * (r1 - r0))
    return np.where(any_reached, np.exp(ln_cross), np.nan)


def ram_pressure_ratio(mass_mjup, radius_cm, r_rsun, rho_gcc, enclosed_mass_msun,
                       strength=DISRUPTION_STRENGTH):
    """Ram pressure over the disruption pressure along a profile, rho_* v_orb^2 / (C rho_p v_esc^2).

    Parameters
    ----------
    mass_mjup, radius_cm : array_like, shape (...)
        Planet mass (M_J) and radius (cm), one per star or one for all.
    r_rsun, rho_gcc : ndarray, shape (..., k)
        Envelope radius (R_sun) and density (g cm^-3), photosphere first.
    enclosed_mass_msun : array_like, shape (..., k) or (...)
        Mass inside each radius (M_sun), or the star's total mass (thin envelopes).
    strength : float
        C of :func:`disruption_pressure`.

    Returns
    -------
    ndarray, shape (..., k)

    References
    ----------
    Jia & Spruit 2018, ApJ 864, 169.
    """
    func = "ram_pressure_ratio"
    r, rho = _profile(r_rsun, rho_gcc, "rho_gcc", func)
    m = _enclosed_mass(enclosed_mass_msun, r, func)
    threshold = np.asarray(disruption_pressure(mass_mjup, radius_cm, strength))[..., None]
    return rho * orbital_velocity(r, m) ** 2 / threshold


def ram_pressure_disruption_radius(mass_mjup, radius_cm, r_rsun, rho_gcc, enclosed_mass_msun,
                                   strength=DISRUPTION_STRENGTH):
    """Radius where ram pressure disrupts the planet (Jia & Spruit 2018).

    .. math::

        \\rho_*(r_d)\\, v_\\mathrm{orb}(r_d)^2 = C \\bar\\rho_p v_\\mathrm{esc,p}^2,
        \\qquad v_\\mathrm{orb}^2 = G m(r)/r,

    found along the envelope profile from the photosphere inward, interpolating
    ln(rho v^2) in ln r (:func:`first_crossing_radius`).

    Parameters
    ----------
    mass_mjup, radius_cm, r_rsun, rho_gcc, enclosed_mass_msun, strength
        As for :func:`ram_pressure_ratio`.

    Returns
    -------
    ndarray, shape (...)
        r_d in R_sun (a planning estimate); NaN where the planet reaches the end of
        the profile (the convective base) intact.

    Notes
    -----
    For Jupiter (4.8e13 erg cm^-3) around 1 M_sun: rho_* >= 0.025 g cm^-3 at 1 R_sun
    (437 km s^-1).  Newer simulations find continuous ablation rather than one
    disruption depth (Lau et al. 2026, arXiv:2605.11343), so r_d is indicative.

    References
    ----------
    Jia, S. & Spruit, H. C. 2018, ApJ 864, 169.
    """
    ratio = ram_pressure_ratio(mass_mjup, radius_cm, r_rsun, rho_gcc, enclosed_mass_msun,
                               strength)
    return first_crossing_radius(np.broadcast_to(np.asarray(r_rsun, dtype=float), ratio.shape),
                                 ratio)


def stripped_fraction(pressure_ratio):
    """Fraction of a planet stripped by a ram pressure below the disruption pressure.

    Model choice (a planning estimate, not from the literature): the planet is a
    uniform-density sphere, whose overburden pressure at radius s is
    P(s) = P_c (1 - s^2/R^2); the layers whose pressure, in units of P_c, is below
    the ram pressure in units of the disruption pressure, x, are stripped:

    .. math::

        f = 1 - (1 - x)^{3/2}, \\qquad 0 \\le x \\le 1,

    so f rises monotonically from 0 (no ram pressure) to 1 at disruption (x = 1),
    joining the "disrupted" case continuously; x >= 1 gives 1.  Compression (which
    delays stripping, Jia & Spruit 2018) is neglected, so f is generous.

    Parameters
    ----------
    pressure_ratio : array_like
        x, the largest rho_* v_orb^2 / (C rho_p v_esc^2) met on the way in.

    Returns
    -------
    ndarray
        Stripped mass fraction, 0-1.

    References
    ----------
    Jia & Spruit 2018, ApJ 864, 169 (ram-pressure disruption and ablation).
    """
    x = np.clip(np.asarray(pressure_ratio, dtype=float), 0.0, 1.0)
    return 1.0 - (1.0 - x) ** 1.5


def ram_pressure_deposited_fraction(mass_mjup, radius_cm, r_rsun, rho_gcc, enclosed_mass_msun,
                                    strength=DISRUPTION_STRENGTH):
    """Fraction of the planet deposited in the convective envelope, ram-pressure scenario.

    1 if the planet is disrupted above the convective base (the end of the profile);
    otherwise the fraction stripped on the way down, :func:`stripped_fraction` of the
    largest ram-pressure ratio met above the base (the intact remnant sinks below the
    envelope and its lithium is lost to the surface; Jia & Spruit 2018, ApJ 864, 169).

    Parameters
    ----------
    mass_mjup, radius_cm, r_rsun, rho_gcc, enclosed_mass_msun, strength
        As for :func:`ram_pressure_ratio`.

    Returns
    -------
    ndarray, shape (...)
        Deposited fraction 0-1 (a planning estimate); NaN for an all-NaN profile.
    """
    ratio = ram_pressure_ratio(mass_mjup, radius_cm, r_rsun, rho_gcc, enclosed_mass_msun,
                               strength)
    valid = np.isfinite(ratio).any(axis=-1)
    largest = np.max(np.where(np.isfinite(ratio), ratio, 0.0), axis=-1)
    return np.where(valid, stripped_fraction(largest), np.nan)


def virial_disruption_radius(mass_mjup, radius_cm, r_rsun, t_k, mu=MU_PLANET):
    """Radius where the stellar temperature reaches the planet's virial temperature.

    T_*(r_vir) = T_vir = G M_p mu m_H / (k R_p) (:func:`virial_temperature`), found
    from the photosphere inward by interpolating ln T in ln r.

    Parameters
    ----------
    mass_mjup, radius_cm : array_like, shape (...)
        Planet mass (M_J) and radius (cm).
    r_rsun, t_k : ndarray, shape (..., k)
        Envelope radius (R_sun) and temperature (K), photosphere first.
    mu : float
        Mean molecular weight of the planet (1.3 default).

    Returns
    -------
    ndarray, shape (...)
        r_vir in R_sun; NaN where the profile never reaches T_vir.

    References
    ----------
    Siess, L. & Livio, M. 1999, MNRAS 304, 925 and 308, 1133.
    """
    r, t = _profile(r_rsun, t_k, "t_k", "virial_disruption_radius")
    t_vir = np.asarray(virial_temperature(mass_mjup, radius_cm, mu))[..., None]
    ratio = t / t_vir
    return first_crossing_radius(np.broadcast_to(r, ratio.shape), ratio)


def virial_deposited_fraction(mass_mjup, radius_cm, r_rsun, t_k, mu=MU_PLANET):
    """Fraction deposited in the convective envelope, virial (thermal) scenario.

    1 if T_vir is reached above the convective base, else 0.  All or nothing by
    construction: peeling a uniform sphere from outside, the specific binding of
    the current surface layer, G M(s)/s ~ s^2, only falls, so heating that removes
    the surface layer removes the rest (a runaway), and heating that cannot leaves
    the planet whole.

    Parameters
    ----------
    mass_mjup, radius_cm, r_rsun, t_k, mu
        As for :func:`virial_disruption_radius`.

    Returns
    -------
    ndarray, shape (...)
        0 or 1 (a planning estimate); NaN for an all-NaN profile.

    References
    ----------
    Siess & Livio 1999, MNRAS 304, 925 and 308, 1133.
    """
    r_vir = virial_disruption_radius(mass_mjup, radius_cm, r_rsun, t_k, mu)
    valid = np.isfinite(np.asarray(t_k, dtype=float)).any(axis=-1)
    return np.where(valid, np.where(np.isfinite(r_vir), 1.0, 0.0), np.nan)


def deposited_fraction(scenario, mass_mjup, kind, profile_r_rsun, profile_rho_gcc, profile_t_k,
                       profile_m_msun, *, strength=DISRUPTION_STRENGTH, mu_planet=MU_PLANET):
    """Fraction of the planet's material that reaches the convective envelope.

    Parameters
    ----------
    scenario : {"full", "ram-pressure", "virial"}
        See the module docstring.
    mass_mjup : array_like, shape (...)
        Planet mass (M_J).
    kind : {"gas_giant", "brown_dwarf", "rocky"}
        Sets the radius (:func:`planet_radius_cm`).
    profile_r_rsun, profile_rho_gcc, profile_t_k, profile_m_msun : ndarray, shape (..., k)
        Envelope profile from the photosphere to the convective base: radius (R_sun),
        density (g cm^-3), temperature (K), interior mass (M_sun; or one total mass
        per star, shape (...)).
    strength : float
        C of the ram-pressure criterion.
    mu_planet : float
        Mean molecular weight of the planet for the virial criterion.

    Returns
    -------
    ndarray, shape (...)
        Deposited fraction 0-1, a planning estimate.

    Raises
    ------
    ConfigError
        Unknown scenario or planet kind.

    References
    ----------
    Jia & Spruit 2018, ApJ 864, 169; Siess & Livio 1999, MNRAS 304, 925.
    """
    if scenario not in SCENARIOS:
        raise ConfigError(f"deposition scenario must be one of {', '.join(SCENARIOS)}; "
                          f"got {scenario!r}")
    radius = planet_radius_cm(mass_mjup, kind)
    if scenario == "ram-pressure":
        return ram_pressure_deposited_fraction(mass_mjup, radius, profile_r_rsun, profile_rho_gcc,
                                               profile_m_msun, strength)
    if scenario == "virial":
        return virial_deposited_fraction(mass_mjup, radius, profile_r_rsun, profile_t_k, mu_planet)
    shape = np.broadcast_shapes(np.shape(radius), np.shape(profile_r_rsun)[:-1])
    return np.ones(shape)


def deposition_columns(mass_mjup, kind, profile_r_rsun, profile_rho_gcc, profile_t_k,
                       profile_m_msun, *, strength=DISRUPTION_STRENGTH, mu_planet=MU_PLANET):
    """Every scenario's deposited fraction and disruption radius, as output columns.

    Parameters
    ----------
    mass_mjup, kind, profile_r_rsun, profile_rho_gcc, profile_t_k, profile_m_msun
        As for :func:`deposited_fraction`.
    strength, mu_planet
        As for :func:`deposited_fraction`.

    Returns
    -------
    dict of str to ndarray, shape (...)
        ``deposited_fraction_full``, ``deposited_fraction_ram_pressure``,
        ``deposited_fraction_virial`` (0-1) and ``disruption_radius_ram_rsun``,
        ``disruption_radius_virial_rsun`` (R_sun; NaN: reaches the convective base
        intact).  Planning estimates.
    """
    radius = planet_radius_cm(mass_mjup, kind)
    columns = {f"deposited_fraction_{name.replace('-', '_')}":
               deposited_fraction(name, mass_mjup, kind, profile_r_rsun, profile_rho_gcc,
                                  profile_t_k, profile_m_msun, strength=strength,
                                  mu_planet=mu_planet)
               for name in SCENARIOS}
    columns["disruption_radius_ram_rsun"] = ram_pressure_disruption_radius(
        mass_mjup, radius, profile_r_rsun, profile_rho_gcc, profile_m_msun, strength)
    columns["disruption_radius_virial_rsun"] = virial_disruption_radius(
        mass_mjup, radius, profile_r_rsun, profile_t_k, mu_planet)
    return columns
