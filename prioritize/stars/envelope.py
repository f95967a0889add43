"""Outer convective envelope from an integration inward from the photosphere.

Given a star's mass M, radius R and luminosity L (from the track grid) and its
composition, the envelope is integrated inward (Kippenhahn, Weigert & Weiss 2012,
ch. 10-11) with ln P as the
independent variable:

    d ln r/d ln P = -H_P / r,                    H_P = P/(rho g),  g = G m/r^2
    d ln q/d ln P = 4 pi r^2 rho H_P / q,        q = M - m, the mass ABOVE r
    d ln T/d ln P = nabla,                        L constant

starting from a grey Eddington photosphere, T(tau=2/3) = T_eff and
P_ph = (2/3) g/kappa(T_eff, rho(P_ph)) (solved by bisection with the table
opacity), and q_ph = 4 pi R^2 P_ph/g, the column above the photosphere.  The mass
above is integrated (not the mass inside) so that thin surface zones of hot stars
keep their precision.  nabla = nabla_rad = 3 kappa L P/(16 pi a c G m T^4) where
nabla_rad <= nabla_ad (Schwarzschild) and the Böhm-Vitense mixing-length gradient
otherwise (Kippenhahn, Weigert & Weiss 2012, eqs. 7.12-7.18):

    (xi - U)^3 + (8 U/9)(xi^2 - U^2 - W) = 0,   nabla = nabla_ad + xi^2 - U^2,
    U = 3 a c T^3/(c_P rho^2 kappa l^2) sqrt(8 H_P/(g delta)),  l = alpha H_P,
    W = nabla_rad - nabla_ad.

Microphysics: the ideal gas + radiation + Saha equation of state of
:mod:`prioritize.stars.eos` and the OPAL + Ferguson (2005) Rosseland opacities of
:mod:`prioritize.stars.opacity`, both tabulated once per composition on a
(log T, log P) grid (:func:`envelope_microphysics`) and interpolated bilinearly.
Integration: classical fourth-order Runge-Kutta in ln P with a fixed step of
:data:`LN_P_STEP`; many stars are integrated together as numpy arrays.

Convective zones and the outer envelope
---------------------------------------
Every convective zone met on the way in is recorded (hot stars have thin H/He I
and He II zones near the surface).  The *outer convective envelope* is the zone
that mixes the photosphere: the outermost zone whose top lies within
:data:`SURFACE_GAP_LN_P` pressure scale heights (Delta ln P) of the photosphere,
extended downward across radiative gaps thinner than :data:`ZONE_GAP_LN_P`
pressure scale heights.  The justification is convective overshoot: elements
cross a formal Schwarzschild boundary by a fraction of a pressure scale height
(helioseismic overshoot below the solar envelope is <~ 0.1-0.2 H_P; solar
granulation overshoots ~1 H_P into the photosphere), so a radiative layer thinner
than twice that is mixed through, while a thicker one separates the zones.  Its
base (r_bcz, T_bcz, rho_bcz, M_cz = mass above r_bcz) is where the surface is
mixed down to.  If no zone is connected to the surface, only the atmosphere above
tau = 2/3 is mixed: M_cz = q_ph, r_bcz = R, T_bcz = T_eff.

Inner boundary and mixing-length calibration
--------------------------------------------
Without a core (main sequence) the integration stops once T > :data:`T_STOP_K`
in a radiative layer (past both the envelope base and the 2.5 MK lithium-burning
isotherm).  With a core mass M_core it stops where m = M_core or r = r_core,
whichever comes first; the mismatch ln(r/r_core) (mass ran out above the core,
> 0) or -ln(m/M_core) (core radius reached with mass to spare, < 0) is returned
as ``core_mismatch``.  One mixing-length parameter alpha is calibrated on the
present Sun (r_bcz = 0.713 R_sun; :func:`calibrate_solar_alpha`).  On the giant
branch the solar alpha runs out of mass above the core, and alpha is solved so
that the envelope meets the core (:func:`solve_alpha_to_core`), scanning from
the high-alpha side because a spurious low-alpha root exists.

The numbers are planning estimates from a simplified envelope model (no
overshoot, no diffusion, constant L, no turbulent pressure), good to ~5 % in
T_bcz and ~10-20 % in M_cz for the Sun.  The module is used to BUILD the track
grid; it needs the ``grid`` extra (``rm-tables``) and is never run at rank time.

References
----------
Kippenhahn, Weigert & Weiss 2012, *Stellar Structure and Evolution*, 2nd ed.,
ch. 7 (mixing length), 10-11 (envelope integrations).
Böhm-Vitense 1958, Z. Astrophys. 46, 108 (mixing-length theory).
Christensen-Dalsgaard, Gough & Thompson 1991, ApJ 378, 413 (r_bcz = 0.713 R_sun).
Iglesias & Rogers 1996, ApJ 464, 943; Ferguson et al. 2005, ApJ 623, 585 (opacity).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from functools import lru_cache

import numpy as np

from ..constants import (A_RAD_CGS, C_LIGHT_CGS, G_CGS, K_B_CGS, L_SUN_ERG_S, M_H_CGS, M_SUN_G,
                         R_SUN_CM, SIGMA_SB_CGS, Z_SUN_TRACKS)
from ..errors import ModelRangeError
from .eos import check_composition, hydrogen_mass_fraction, tabulate_eos
from .opacity import opacity_function

SOLAR_BCZ_RADIUS_FRACTION = 0.713   # Christensen-Dalsgaard, Gough & Thompson 1991, ApJ 378, 413
LITHIUM_BURNING_T_K = 2.5e6         # 7Li(p,alpha) destroys Li above ~2.5 MK (Pompéia et al. 2002)
LN_P_STEP = 0.1                     # RK4 step in ln P; 0.025 changes solar T_bcz by 0.04 %, F-dwarf M_cz by 0.7 %
T_STOP_K = 3.0e6                    # no-core integrations stop past this T in a radiative layer
R_STOP_FRACTION = 0.05              # ... or at r < 0.05 R (the envelope then reaches the centre)
SURFACE_GAP_LN_P = 1.0              # radiative layer between photosphere and a zone mixed by overshoot
ZONE_GAP_LN_P = 0.4                 # radiative gap between two zones mixed by overshoot (2 x 0.2 H_P)
DEFAULT_CORE_RADIUS_RSUN = 0.03     # radius of a giant's degenerate helium core (approximate)
HELIUM_BURNING_CORE_RADIUS_RSUN = 0.1  # ~ZAMS radius of a 0.5 M_sun helium star (Hurley et al. 2000, from memory)
CORE_RADIUS_WINDOW_RSUN = (0.01, 0.1)  # core radii accepted as "meets the core" (0.03 -> 0.1 moves giant M_cz 0.8 %)
PROFILE_POINTS = 16
PROFILE_DEPTH_FRACTIONS = np.linspace(0.0, 1.0, PROFILE_POINTS)
"""Profile depths f_k: r_k = R (r_bcz/R)^f_k, evenly spaced in ln r from the
photosphere (f = 0) to the base of the outer convective envelope (f = 1)."""

ALPHA_SCAN = np.array([3.6, 3.2, 2.9, 2.6, 2.4, 2.2, 2.0, 1.85, 1.7, 1.55, 1.4, 1.25, 1.1, 0.95, 0.8])
"""Mixing-length values scanned from the HIGH side when alpha is solved."""
ALPHA_REFINE_POINTS = 7             # per refinement round inside the bracket
ALPHA_REFINE_ROUNDS = 2

QUALITY_OK = "ok"                   # integration reached its stopping point; alpha as given
QUALITY_ALPHA_SOLVED = "alpha_solved"  # alpha solved so that the envelope meets the core
QUALITY_HIT_CORE = "hit_core"       # the inner boundary was reached inside the outer convective zone
QUALITY_CORE_MISMATCH = "core_mismatch"  # fixed alpha: envelope does not meet the core (see core_mismatch)
QUALITY_NO_SOLUTION = "no_solution"  # no alpha makes a constant-L envelope meet the core
QUALITY_OUT_OF_RANGE = "out_of_range"  # left the microphysics tables (or photosphere not found)

_LOG_T_AXIS = (3.40, 8.00, 0.01)     # log10 T (K): start, stop, step of the microphysics table
_LOG_P_AXIS = (1.00, 19.50, 0.025)   # log10 P (dyn cm^-2)
_STOP_NONE, _STOP_CORE_MASS, _STOP_CORE_RADIUS, _STOP_TEMPERATURE, _STOP_CENTRE, _STOP_TABLE = range(6)


@dataclass(frozen=True)
class ConvectiveZone:
    """One convective zone met by the integration (top = outer boundary)."""

    r_top_rsun: float
    r_bottom_rsun: float
    m_above_top_msun: float
    m_above_bottom_msun: float
    t_bottom_k: float
    reaches_inner_boundary: bool


@dataclass(frozen=True)
class EnvelopeResult:
    """Envelope of one star (all planning estimates; see the module docstring).

    Attributes
    ----------
    m_cz_msun : float
        Mass of the outer convective envelope (above r_bcz), M_sun.
    r_bcz_rsun, t_bcz_k, rho_bcz_gcc : float
        Radius (R_sun), temperature (K) and density (g cm^-3) at its base.
    m_above_2p5mk_msun : float
        Mass above the 2.5 MK isotherm (the lithium-preserving mass), M_sun; NaN if
        the integration never reaches 2.5 MK.
    profile_r_rsun, profile_rho_gcc, profile_t_k, profile_m_msun : ndarray
        Radius, density, temperature and interior mass m(r) at the
        :data:`PROFILE_DEPTH_FRACTIONS` depths between the photosphere and r_bcz.
    zones : tuple of ConvectiveZone
        Every convective zone, outermost first.
    quality : str
        One of the ``QUALITY_*`` codes.
    alpha_mlt : float
        Mixing-length parameter used.
    core_mismatch : float
        ln(r/r_core) where the mass ran out (> 0), -ln(m/M_core) where the core
        radius was reached first (< 0); NaN without a core.
    p_photosphere_dyn_cm2 : float
        Photospheric pressure of the grey atmosphere.
    """

    mass_msun: float
    radius_rsun: float
    logl: float
    teff_k: float
    x: float
    z: float
    alpha_mlt: float
    m_cz_msun: float
    r_bcz_rsun: float
    t_bcz_k: float
    rho_bcz_gcc: float
    m_above_2p5mk_msun: float
    profile_r_rsun: np.ndarray = field(repr=False)
    profile_rho_gcc: np.ndarray = field(repr=False)
    profile_t_k: np.ndarray = field(repr=False)
    profile_m_msun: np.ndarray = field(repr=False)
    zones: tuple = ()
    quality: str = QUALITY_OK
    core_mismatch: float = float("nan")
    p_photosphere_dyn_cm2: float = float("nan")


@dataclass(frozen=True)
class EnvelopeMicrophysics:
    """EOS and opacity on one regular (log10 T, log10 P) grid; values[..., k] holds
    ln rho, nabla_ad, ln c_P, delta, ln kappa."""

    log_t0: float
    log_p0: float
    step_t: float
    step_p: float
    values: np.ndarray


@lru_cache(maxsize=16)
def envelope_microphysics(x: float, z: float) -> EnvelopeMicrophysics:
    """Tabulate the equation of state and the opacity for one composition.

    ~1 s per composition (the Saha solution on 3.4e5 grid points plus the opacity
    lookups); cached in memory.

    Parameters
    ----------
    x, z : float
        Hydrogen and metal mass fractions.

    Returns
    -------
    EnvelopeMicrophysics
        Grid 10^3.4-10^8 K (0.01 dex) by 10-10^19.5 dyn cm^-2 (0.025 dex).

    References
    ----------
    See :func:`prioritize.stars.eos.tabulate_eos` and
    :func:`prioritize.stars.opacity.opacity_function`.
    """
    check_composition(x, z)
    kappa = opacity_function(x, z)
    log_t = np.arange(_LOG_T_AXIS[0], _LOG_T_AXIS[1] + 0.5 * _LOG_T_AXIS[2], _LOG_T_AXIS[2])
    log_p = np.arange(_LOG_P_AXIS[0], _LOG_P_AXIS[1] + 0.5 * _LOG_P_AXIS[2], _LOG_P_AXIS[2])
    table = tabulate_eos(x, z, log_t, log_p)
    tt = np.broadcast_to(10.0 ** log_t[:, None], table.ln_rho.shape)
    good = np.isfinite(table.ln_rho) & np.isfinite(table.nabla_ad) & (table.c_p > 0)
    ln_kappa = np.full(table.ln_rho.shape, np.nan)
    ln_kappa[good] = np.log(kappa(tt[good], np.exp(table.ln_rho[good])))
    values = np.stack([table.ln_rho, table.nabla_ad, np.log(np.where(good, table.c_p, np.nan)),
                       table.delta, ln_kappa], axis=-1)
    return EnvelopeMicrophysics(log_t[0], log_p[0], _LOG_T_AXIS[2], _LOG_P_AXIS[2], values)


def _lookup(micro: EnvelopeMicrophysics, ln_t, ln_p):
    """Bilinear interpolation of the microphysics table; NaN outside it."""
    ln10 = np.log(10.0)
    nt, np_ = micro.values.shape[:2]
    ft = (ln_t / ln10 - micro.log_t0) / micro.step_t
    fp = (ln_p / ln10 - micro.log_p0) / micro.step_p
    inside = (ft >= 0) & (ft <= nt - 1) & (fp >= 0) & (fp <= np_ - 1)
    ft, fp = np.where(inside, ft, 0.0), np.where(inside, fp, 0.0)
    i = np.minimum(ft.astype(int), nt - 2)
    j = np.minimum(fp.astype(int), np_ - 2)
    wt = (ft - i)[:, None]
    wp = (fp - j)[:, None]
    v = micro.values
    out = ((1 - wt) * ((1 - wp) * v[i, j] + wp * v[i, j + 1])
           + wt * ((1 - wp) * v[i + 1, j] + wp * v[i + 1, j + 1]))
    out[~inside] = np.nan
    return out[:, 0], out[:, 1], out[:, 2], out[:, 3], out[:, 4]


def mixing_length_gradient(nabla_rad, nabla_ad, u):
    """Temperature gradient of Böhm-Vitense mixing-length convection.

    Solves the cubic (KWW eq. 7.18) for xi > U,

        (xi - U)^3 + (8 U/9)(xi^2 - U^2 - W) = 0,   W = nabla_rad - nabla_ad,

    written for s = xi - U > 0 as s^3 + (8U/9) s^2 + (16U^2/9) s - (8U/9) W = 0
    (monotonic and convex for s > 0), by Newton's method from an upper bound, and
    returns nabla = nabla_ad + s (s + 2U).  Radiative layers (W <= 0) return
    nabla_rad.  Limits: U -> 0 (efficient convection) gives nabla_ad; U -> infinity
    gives nabla_rad.

    Parameters
    ----------
    nabla_rad, nabla_ad : array_like
        Radiative and adiabatic gradients.
    u : array_like
        Efficiency parameter U = 3 a c T^3/(c_P rho^2 kappa l^2) sqrt(8 H_P/(g delta)) > 0.

    Returns
    -------
    ndarray
        nabla = d ln T/d ln P.

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, eqs. 7.12-7.18; Böhm-Vitense 1958.
    """
    nabla_rad, nabla_ad, u = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (nabla_rad, nabla_ad, u)))
    w = nabla_rad - nabla_ad
    result = nabla_rad.astype(float).copy()
    conv = w > 0
    if not np.any(conv):
        return result
    w_c, u_c = w[conv], u[conv]
    b, c, d = 8.0 * u_c / 9.0, 16.0 * u_c**2 / 9.0, 8.0 * u_c * w_c / 9.0
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.minimum(np.minimum(np.cbrt(d), np.sqrt(w_c)), np.where(u_c > 0, w_c / (2.0 * u_c), np.inf))
    for _ in range(60):
        f = ((s + b) * s + c) * s - d
        step = f / ((3.0 * s + 2.0 * b) * s + c)
        s = s - step
        if np.all(np.abs(step) <= 1e-12 * s):
            break
    result[conv] = nabla_ad[conv] + s * (s + 2.0 * u_c)
    return result


def thin_envelope_temperature(r_rsun, mass_msun, radius_rsun, mu=0.6):
    """Temperature of a thin adiabatic (n = 3/2) envelope: a check of the integrator.

    T(r) = (2/5) (mu m_H G M/k) (1/r - 1/R), for an envelope of negligible mass
    (m(r) ~ M) that is adiabatic with nabla = 2/5 throughout.

    Parameters
    ----------
    r_rsun : array_like
        Radius inside the envelope, R_sun.
    mass_msun, radius_rsun : float or array_like
        Stellar mass (M_sun) and radius (R_sun).
    mu : float, optional
        Mean molecular weight (0.6 for fully ionised solar gas).

    Returns
    -------
    ndarray
        Temperature, K.  Fails for massive giant envelopes, where m(r) varies.

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, §10.3 (adiabatic envelopes).
    """
    r = np.asarray(r_rsun, dtype=float) * R_SUN_CM
    big_r = np.asarray(radius_rsun, dtype=float) * R_SUN_CM
    return 0.4 * mu * M_H_CGS * G_CGS * np.asarray(mass_msun, dtype=float) * M_SUN_G / K_B_CGS * (1.0 / r - 1.0 / big_r)


def _derivatives(micro, ln_p, ln_r, ln_q, ln_t, mass_g, lum, alpha):
    """Right-hand sides d(ln r, ln q, ln T)/d ln P, plus W = nabla_rad - nabla_ad and ln rho."""
    ln_rho, nabla_ad, ln_cp, delta, ln_kappa = _lookup(micro, ln_t, ln_p)
    r, q, p, t = np.exp(ln_r), np.exp(ln_q), np.exp(ln_p), np.exp(ln_t)
    rho, kappa = np.exp(ln_rho), np.exp(ln_kappa)
    m = np.maximum(mass_g - q, 1e-3 * mass_g)
    g = G_CGS * m / r**2
    h_p = p / (rho * g)
    nabla_rad = 3.0 * kappa * lum * p / (16.0 * np.pi * A_RAD_CGS * C_LIGHT_CGS * G_CGS * m * t**4)
    ell = alpha * h_p
    with np.errstate(invalid="ignore"):
        u = (3.0 * A_RAD_CGS * C_LIGHT_CGS * t**3 / (np.exp(ln_cp) * rho**2 * kappa * ell**2)
             * np.sqrt(8.0 * h_p / (g * delta)))
    nabla = mixing_length_gradient(nabla_rad, nabla_ad, u)
    return np.stack([-h_p / r, 4.0 * np.pi * r**2 * rho * h_p / q, nabla]), nabla_rad - nabla_ad, ln_rho


def _photosphere_ln_pressure(micro, teff_k, gravity):
    """ln P at tau = 2/3 of a grey atmosphere: P = (2/3) g/kappa(T_eff, rho(P)), by bisection."""
    ln10 = np.log(10.0)
    n_p = micro.values.shape[1]
    bottom, top = micro.log_p0 * ln10, (micro.log_p0 + (n_p - 1) * micro.step_p) * ln10
    lo, hi = np.full(teff_k.shape, bottom), np.full(teff_k.shape, top)
    ln_t, target = np.log(teff_k), np.log(2.0 * gravity / 3.0)
    for _ in range(50):
        mid = 0.5 * (lo + hi)
        ln_kappa = _lookup(micro, ln_t, mid)[4]
        h = np.where(np.isfinite(ln_kappa), mid + ln_kappa - target, -np.inf)
        lo, hi = np.where(h < 0, mid, lo), np.where(h < 0, hi, mid)
    found = (lo > bottom + 1e-6) & (hi < top - 1e-6)
    return np.where(found, 0.5 * (lo + hi), np.nan)


@dataclass
class _Run:
    """Raw output of a batch integration: per-step rows (step, star) and stop data."""

    rows: np.ndarray        # (n_rows, 6, n): ln P, ln r, ln q, ln T, ln rho, W
    last: np.ndarray        # index of the last row per star
    stop: np.ndarray        # _STOP_* code per star
    teff_k: np.ndarray


def _integrate(micro, mass_g, radius_cm, lum, alpha, core_mass_g, core_radius_cm):
    """RK4 integration in ln P for a batch of stars (arrays of equal length)."""
    n = mass_g.size
    teff = (lum / (4.0 * np.pi * radius_cm**2 * SIGMA_SB_CGS)) ** 0.25
    gravity = G_CGS * mass_g / radius_cm**2
    ln_p = _photosphere_ln_pressure(micro, teff, gravity)
    y = np.stack([np.log(radius_cm), np.log(4.0 * np.pi * radius_cm**2 * np.exp(ln_p) / gravity), np.log(teff)])
    has_core = core_mass_g > 0
    ln_q_core = np.log(np.where(has_core, mass_g - core_mass_g, (1.0 - R_STOP_FRACTION) * mass_g))
    ln_r_core = np.log(np.where(has_core, core_radius_cm, R_STOP_FRACTION * radius_cm))
    h = LN_P_STEP
    max_steps = int(np.ceil((_LOG_P_AXIS[1] - _LOG_P_AXIS[0]) * np.log(10.0) / h)) + 1
    rows = np.full((max_steps + 1, 6, n), np.nan)
    last = np.zeros(n, dtype=int)
    stop = np.full(n, _STOP_NONE)
    active = np.isfinite(ln_p)
    stop[~active] = _STOP_TABLE
    idx = np.flatnonzero(active)
    k1, w, ln_rho = _derivatives(micro, ln_p[idx], *y[:, idx], mass_g[idx], lum[idx], alpha[idx])
    rows[0, :, idx] = np.column_stack([ln_p[idx], y[:, idx].T, ln_rho, w])
    for step in range(1, max_steps + 1):
        if idx.size == 0:
            break
        args = (mass_g[idx], lum[idx], alpha[idx])
        p0, y0 = ln_p[idx], y[:, idx]
        k2 = _derivatives(micro, p0 + 0.5 * h, *(y0 + 0.5 * h * k1), *args)[0]
        k3 = _derivatives(micro, p0 + 0.5 * h, *(y0 + 0.5 * h * k2), *args)[0]
        k4 = _derivatives(micro, p0 + h, *(y0 + h * k3), *args)[0]
        y1 = y0 + h / 6.0 * (k1 + 2.0 * k2 + 2.0 * k3 + k4)
        p1 = p0 + h
        k1, w, ln_rho = _derivatives(micro, p1, *y1, *args)
        ln_p[idx], y[:, idx] = p1, y1
        rows[step, :, idx] = np.column_stack([p1, y1.T, ln_rho, w])
        last[idx] = step
        bad = ~(np.all(np.isfinite(k1), axis=0) & np.isfinite(w))
        core_mass_hit = y1[1] >= ln_q_core[idx]
        core_radius_hit = y1[0] <= ln_r_core[idx]
        hot = ~has_core[idx] & (y1[2] >= np.log(T_STOP_K)) & (w <= 0)
        codes = np.select(
            [bad, core_mass_hit & has_core[idx], core_radius_hit & has_core[idx],
             hot, core_mass_hit | core_radius_hit],
            [_STOP_TABLE, _STOP_CORE_MASS, _STOP_CORE_RADIUS, _STOP_TEMPERATURE, _STOP_CENTRE],
            _STOP_NONE)
        stop[idx] = codes
        keep = codes == _STOP_NONE
        idx, k1 = idx[keep], k1[:, keep]
    return _Run(rows=rows, last=last, stop=stop, teff_k=teff)


def _crossing(a0, a1, target):
    """Fraction of the way from a0 to a1 where the linear interpolant reaches target."""
    return float(np.clip((target - a0) / (a1 - a0), 0.0, 1.0)) if a1 != a0 else 0.0


def _summarise(run: _Run, i, mass_g, radius_cm, lum, alpha, core_mass_g, core_radius_cm, x, z):
    """Zones, outer-envelope base, lithium-preserving mass and profile of star i."""
    nan = float("nan")
    base_fields = dict(mass_msun=float(mass_g / M_SUN_G), radius_rsun=float(radius_cm / R_SUN_CM),
                       logl=float(np.log10(lum / L_SUN_ERG_S)), teff_k=float(run.teff_k[i]),
                       x=x, z=z, alpha_mlt=float(alpha))
    rows = run.rows[: run.last[i] + 1, :, i]
    rows = rows[np.all(np.isfinite(rows), axis=1)]
    stop = run.stop[i]
    if rows.shape[0] < 2:
        return _empty_result(base_fields, QUALITY_OUT_OF_RANGE)
    # Cut the last step at the inner boundary it crossed.
    mismatch = nan
    if stop in (_STOP_CORE_MASS, _STOP_CORE_RADIUS, _STOP_CENTRE):
        a, b = rows[-2], rows[-1]
        has_core = core_mass_g > 0
        ln_q_in = np.log(mass_g - core_mass_g) if has_core else np.log((1.0 - R_STOP_FRACTION) * mass_g)
        ln_r_in = np.log(core_radius_cm) if has_core else np.log(R_STOP_FRACTION * radius_cm)
        f_mass = _crossing(a[2], b[2], ln_q_in) if b[2] >= ln_q_in else 1.0
        f_radius = _crossing(a[1], b[1], ln_r_in) if b[1] <= ln_r_in else 1.0
        end = a + min(f_mass, f_radius) * (b - a)
        rows = np.vstack([rows[:-1], end])
        if has_core:
            if f_mass <= f_radius:
                mismatch = float(end[1] - ln_r_in)
            else:
                mismatch = float(-np.log((mass_g - np.exp(end[2])) / core_mass_g))
    ln_p, ln_r, ln_q, ln_t, ln_rho, w = rows.T

    zones, bounds = _zones(rows)
    quality = QUALITY_OK
    chain = _surface_chain(bounds, ln_p[0])
    if chain is None:
        base = rows[0]
    else:
        base = bounds[chain][1]
        if zones[chain].reaches_inner_boundary:
            quality = QUALITY_HIT_CORE
    if stop in (_STOP_TABLE, _STOP_NONE) and (chain is None or zones[chain].reaches_inner_boundary):
        quality = QUALITY_OUT_OF_RANGE
    elif np.isfinite(mismatch) and quality == QUALITY_OK:
        r_core_rsun = core_radius_cm / R_SUN_CM
        lo, hi = (np.log(edge / r_core_rsun) for edge in CORE_RADIUS_WINDOW_RSUN)
        if not lo <= mismatch <= hi:
            quality = QUALITY_CORE_MISMATCH

    ln_t_li = np.log(LITHIUM_BURNING_T_K)
    if ln_t[-1] >= ln_t_li:
        m_li = float(np.exp(np.interp(ln_t_li, ln_t, ln_q)) / M_SUN_G)
    else:
        m_li = nan
    ln_r_prof = ln_r[0] + PROFILE_DEPTH_FRACTIONS * (base[1] - ln_r[0])
    order = np.argsort(ln_r)
    prof = [np.interp(ln_r_prof, ln_r[order], col[order]) for col in (ln_rho, ln_t, ln_q)]
    return EnvelopeResult(
        **base_fields,
        m_cz_msun=float(np.exp(base[2]) / M_SUN_G), r_bcz_rsun=float(np.exp(base[1]) / R_SUN_CM),
        t_bcz_k=float(np.exp(base[3])), rho_bcz_gcc=float(np.exp(base[4])), m_above_2p5mk_msun=m_li,
        profile_r_rsun=np.exp(ln_r_prof) / R_SUN_CM, profile_rho_gcc=np.exp(prof[0]),
        profile_t_k=np.exp(prof[1]), profile_m_msun=(mass_g - np.exp(prof[2])) / M_SUN_G,
        zones=tuple(zones), quality=quality, core_mismatch=mismatch,
        p_photosphere_dyn_cm2=float(np.exp(ln_p[0])))


def _zones(rows):
    """Convective zones (W > 0) with their top and bottom rows interpolated to W = 0."""
    w = rows[:, 5]
    conv = w > 0
    edges = np.flatnonzero(np.diff(conv.astype(int)))
    tops = [0] if conv[0] else []
    bottoms = []
    for k in edges:
        (tops if conv[k + 1] else bottoms).append(k)
    zones, bounds = [], []
    for top in tops:
        later = [b for b in bottoms if b >= top]
        if top == 0 and conv[0]:
            top_row = rows[0]
        else:
            top_row = rows[top] + _crossing(w[top], w[top + 1], 0.0) * (rows[top + 1] - rows[top])
        if later:
            b = later[0]
            bottom_row = rows[b] + _crossing(w[b], w[b + 1], 0.0) * (rows[b + 1] - rows[b])
        else:
            bottom_row = rows[-1]
        zones.append(ConvectiveZone(
            r_top_rsun=float(np.exp(top_row[1]) / R_SUN_CM), r_bottom_rsun=float(np.exp(bottom_row[1]) / R_SUN_CM),
            m_above_top_msun=float(np.exp(top_row[2]) / M_SUN_G),
            m_above_bottom_msun=float(np.exp(bottom_row[2]) / M_SUN_G),
            t_bottom_k=float(np.exp(bottom_row[3])), reaches_inner_boundary=not later))
        bounds.append((top_row, bottom_row))
    return zones, bounds


def _surface_chain(bounds, ln_p_photosphere):
    """Index of the deepest zone of the chain that mixes the photosphere, or None."""
    if not bounds or bounds[0][0][0] - ln_p_photosphere > SURFACE_GAP_LN_P:
        return None
    k = 0
    while k + 1 < len(bounds) and bounds[k + 1][0][0] - bounds[k][1][0] <= ZONE_GAP_LN_P:
        k += 1
    return k


def _empty_result(base_fields, quality):
    nan = float("nan")
    empty = np.full(PROFILE_POINTS, nan)
    return EnvelopeResult(**base_fields, m_cz_msun=nan, r_bcz_rsun=nan, t_bcz_k=nan, rho_bcz_gcc=nan,
                          m_above_2p5mk_msun=nan, profile_r_rsun=empty, profile_rho_gcc=empty,
                          profile_t_k=empty, profile_m_msun=empty, quality=quality)


_BATCH = 256   # stars integrated together; bounds the per-step history to ~20 MB


def _as_batch(mass_msun, radius_rsun, logl, alpha, core_mass_msun, core_radius_rsun):
    """Broadcast and validate the per-star inputs; cgs arrays."""
    names = ("mass_msun", "radius_rsun", "logl", "alpha", "core_mass_msun", "core_radius_rsun")
    core = np.nan if core_mass_msun is None else core_mass_msun
    inputs = (mass_msun, radius_rsun, logl, alpha, core, core_radius_rsun)
    arrays = np.broadcast_arrays(*(np.asarray(v, dtype=float).ravel() for v in inputs))
    mass, radius, logl_, alpha_, core_mass, core_radius = (np.array(a) for a in arrays)
    for name, values, ok in ((names[0], mass, mass > 0), (names[1], radius, radius > 0),
                             (names[2], logl_, np.abs(logl_) < 7), (names[3], alpha_, alpha_ > 0),
                             (names[5], core_radius, core_radius > 0)):
        if not np.all(np.isfinite(values) & ok):
            raise ModelRangeError(f"{name} must be finite and physical (mass, radius, alpha, core radius > 0; "
                                  f"|logl| < 7); got {values[~(np.isfinite(values) & ok)][:3]!r}")
    core_mass = np.where(np.isfinite(core_mass) & (core_mass > 0), core_mass, 0.0)
    if np.any(core_mass >= mass):
        raise ModelRangeError("core_mass_msun must be smaller than mass_msun")
    return (mass * M_SUN_G, radius * R_SUN_CM, 10.0**logl_ * L_SUN_ERG_S, alpha_,
            core_mass * M_SUN_G, core_radius * R_SUN_CM)


def _composition(z, x):
    z = float(z)
    x = float(hydrogen_mass_fraction(z)) if x is None else float(x)
    check_composition(x, z)
    return round(x, 6), round(z, 6)


def integrate_envelopes(mass_msun, radius_rsun, logl, z, alpha, x=None, core_mass_msun=None,
                        core_radius_rsun=DEFAULT_CORE_RADIUS_RSUN) -> list[EnvelopeResult]:
    """Integrate the envelopes of many stars of one composition (batch form).

    Stars are integrated together as numpy arrays in batches of 256, which costs
    ~1 ms per star instead of ~0.1 s for one star alone.  See
    :func:`integrate_envelope` for the physics and the arguments; every argument
    except ``z`` and ``x`` broadcasts.  ``core_mass_msun`` NaN or 0 means no core.

    Returns
    -------
    list of EnvelopeResult
        One per star, in input order.
    """
    x, z = _composition(z, x)
    mass, radius, lum, alpha_, core_mass, core_radius = _as_batch(
        mass_msun, radius_rsun, logl, alpha, core_mass_msun, core_radius_rsun)
    micro = envelope_microphysics(x, z)
    results = []
    for start in range(0, mass.size, _BATCH):
        part = slice(start, start + _BATCH)
        run = _integrate(micro, mass[part], radius[part], lum[part], alpha_[part], core_mass[part], core_radius[part])
        results.extend(_summarise(run, i, mass[part][i], radius[part][i], lum[part][i], alpha_[part][i],
                                  core_mass[part][i], core_radius[part][i], x, z)
                       for i in range(run.last.size))
    return results


def integrate_envelope(mass_msun, radius_rsun, logl, z, alpha, x=None, core_mass_msun=None,
                       core_radius_rsun=DEFAULT_CORE_RADIUS_RSUN) -> EnvelopeResult:
    """Integrate one star's envelope inward from a grey photosphere (planning estimate).

    Integrates d ln r, d ln q (q = mass above), d ln T per d ln P with L constant,
    mixing-length convection (KWW eq. 7.18), Saha equation of state and OPAL +
    Ferguson opacities (see the module docstring), and returns the outer convective
    envelope (the zone chain that mixes the photosphere), every convective zone, the
    mass above 2.5 MK and a density/temperature profile.

    Parameters
    ----------
    mass_msun, radius_rsun : float
        Stellar mass (M_sun) and photospheric radius (R_sun).
    logl : float
        log10 L/L_sun; T_eff follows from L = 4 pi R^2 sigma T_eff^4.
    z : float
        Metal mass fraction.
    alpha : float
        Mixing-length parameter l/H_P (see :func:`calibrate_solar_alpha`).
    x : float, optional
        Hydrogen mass fraction; default X = 0.76 - 3 Z (the track grid's law).
    core_mass_msun : float, optional
        Helium core mass (M_sun).  Given: the integration stops at m = M_core or
        r = r_core and reports the mismatch.  None: stops past 3 MK in a radiative
        layer (main sequence).
    core_radius_rsun : float, optional
        Core radius (R_sun), default 0.03.

    Returns
    -------
    EnvelopeResult
        ``quality`` is ``ok``, ``hit_core`` (the surface zone reaches the inner
        boundary: M_cz = M - M_core is then an upper bound set by the boundary),
        ``core_mismatch`` (envelope does not meet the core with this alpha) or
        ``out_of_range``.

    Raises
    ------
    ModelRangeError
        For non-physical inputs or a composition outside the opacity tables.
    ImportError
        Without the ``grid`` extra (``rm-tables``).

    Notes
    -----
    Valid for 0.7-3 M_sun stars from the main sequence to the giant branch with
    3,500 K <~ T_eff <~ 10,000 K.  Costs ~0.1 s alone (numpy overhead per step);
    :func:`integrate_envelopes` does many stars at ~1 ms each.  Core radii below
    ~0.02 R_sun take the integration to densities where the ideal-gas equation of
    state (no degeneracy) and the table end (``out_of_range``).

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, ch. 7, 10-11; Böhm-Vitense 1958;
    Iglesias & Rogers 1996; Ferguson et al. 2005.
    """
    for name, value in (("mass_msun", mass_msun), ("radius_rsun", radius_rsun), ("logl", logl), ("alpha", alpha)):
        if np.ndim(value):
            raise ModelRangeError(f"integrate_envelope takes one star: {name} must be a scalar; "
                                  "use integrate_envelopes for arrays")
    return integrate_envelopes(mass_msun, radius_rsun, logl, z, alpha, x=x, core_mass_msun=core_mass_msun,
                               core_radius_rsun=core_radius_rsun)[0]


def _first_sign_change(alphas, residuals):
    """Per row, the first bracket (from the high-alpha side, column 0) where the residual changes sign.

    Returns (alpha_high, alpha_low, residual_high, residual_low, found).
    """
    r0, r1 = residuals[:, :-1], residuals[:, 1:]
    change = np.isfinite(r0) & np.isfinite(r1) & (np.sign(r0) != np.sign(r1))
    found = change.any(axis=1)
    k = np.argmax(change, axis=1)
    rows = np.arange(alphas.shape[0])
    return alphas[rows, k], alphas[rows, k + 1], r0[rows, k], r1[rows, k], found


def _solve_alpha(residual, n):
    """Root of residual(star_index, alpha) per star: scan from high alpha, then refine.

    ``residual`` maps arrays (star indices, alphas) to residuals.  Returns the alphas
    (NaN where no sign change exists in :data:`ALPHA_SCAN`).
    """
    stars = np.arange(n)
    grid = np.broadcast_to(ALPHA_SCAN, (n, ALPHA_SCAN.size))
    res = residual(np.repeat(stars, ALPHA_SCAN.size), grid.ravel()).reshape(grid.shape)
    hi, lo, r_hi, r_lo, found = _first_sign_change(grid, res)
    for _ in range(ALPHA_REFINE_ROUNDS):
        todo = np.flatnonzero(found)
        if todo.size == 0:
            break
        inner = hi[todo, None] + (lo - hi)[todo, None] * np.arange(1, ALPHA_REFINE_POINTS + 1) / (ALPHA_REFINE_POINTS + 1)
        r_inner = residual(np.repeat(todo, ALPHA_REFINE_POINTS), inner.ravel()).reshape(inner.shape)
        a = np.column_stack([hi[todo], inner, lo[todo]])
        r = np.column_stack([r_hi[todo], r_inner, r_lo[todo]])
        hi[todo], lo[todo], r_hi[todo], r_lo[todo], _ = _first_sign_change(a, r)
    alpha = hi + (lo - hi) * r_hi / (r_hi - r_lo)
    return np.where(found, alpha, np.nan)


def calibrate_solar_alpha(z: float = Z_SUN_TRACKS, x: float | None = None,
                          r_bcz_rsun: float = SOLAR_BCZ_RADIUS_FRACTION) -> float:
    """Mixing-length parameter that puts the present Sun's convective base at r_bcz.

    Integrates the envelope of M = 1 M_sun, R = 1 R_sun, L = 1 L_sun (T_eff =
    5772 K, IAU 2015) and solves r_bcz(alpha) = 0.713 R_sun (helioseismology).
    The default composition is the track grid's solar one, Z = 0.02 with
    X = 0.76 - 3 Z = 0.70, so that the grid's own Sun has the observed envelope
    depth; with the present solar surface mixture X = 0.735, Z = 0.018 the same
    procedure gives alpha = 2.32, T_bcz = 2.19 MK, rho_bcz = 0.19 g cm^-3.

    Parameters
    ----------
    z : float, optional
        Metal mass fraction.
    x : float, optional
        Hydrogen mass fraction; default 0.76 - 3 Z.
    r_bcz_rsun : float, optional
        Target radius of the convective base, R_sun.

    Returns
    -------
    float
        alpha = l/H_P (a calibration constant of this envelope model only).

    Raises
    ------
    ModelRangeError
        If no alpha in 0.8-3.6 reaches the target.

    References
    ----------
    Christensen-Dalsgaard, Gough & Thompson 1991, ApJ 378, 413 (r_bcz = 0.713 R_sun);
    Prša et al. 2016, AJ 152, 41 (IAU 2015 nominal solar values).
    """
    x, z = _composition(z, x)
    if not 0.3 < r_bcz_rsun < 1.0:
        raise ModelRangeError(f"r_bcz_rsun must lie between 0.3 and 1; got {r_bcz_rsun!r}")

    def residual(_, alphas):
        results = integrate_envelopes(1.0, 1.0, 0.0, z, alphas, x=x)
        return np.array([r.r_bcz_rsun - r_bcz_rsun for r in results])

    alpha = float(_solve_alpha(residual, 1)[0])
    if not np.isfinite(alpha):
        raise ModelRangeError(f"no mixing-length parameter in {ALPHA_SCAN.min()}-{ALPHA_SCAN.max()} puts the "
                              f"solar convective base at {r_bcz_rsun} R_sun for X={x}, Z={z}")
    return alpha


def solve_alphas_to_core(mass_msun, radius_rsun, logl, z, core_mass_msun,
                         core_radius_rsun=DEFAULT_CORE_RADIUS_RSUN, x=None) -> list[EnvelopeResult]:
    """Batch form of :func:`solve_alpha_to_core` (arrays broadcast; one composition)."""
    x, z = _composition(z, x)
    mass, radius, logl_, core, core_r = np.broadcast_arrays(
        *(np.asarray(v, dtype=float).ravel() for v in (mass_msun, radius_rsun, logl, core_mass_msun, core_radius_rsun)))
    if np.any(~np.isfinite(core) | (core <= 0)):
        raise ModelRangeError("solve_alpha_to_core needs a positive core_mass_msun for every star")

    def residual(stars, alphas):
        results = integrate_envelopes(mass[stars], radius[stars], logl_[stars], z, alphas, x=x,
                                      core_mass_msun=core[stars], core_radius_rsun=core_r[stars])
        return np.array([r.core_mismatch for r in results])

    alpha = _solve_alpha(residual, mass.size)
    solved = np.isfinite(alpha)
    out = [None] * mass.size
    if solved.any():
        idx = np.flatnonzero(solved)
        final = integrate_envelopes(mass[idx], radius[idx], logl_[idx], z, alpha[idx], x=x,
                                    core_mass_msun=core[idx], core_radius_rsun=core_r[idx])
        for i, result in zip(idx, final):
            ok = result.quality in (QUALITY_OK, QUALITY_HIT_CORE) and np.isfinite(result.core_mismatch)
            out[i] = _with_quality(result, QUALITY_ALPHA_SOLVED if ok else QUALITY_NO_SOLUTION)
    for i in np.flatnonzero(~solved):
        out[i] = _empty_result(dict(mass_msun=float(mass[i]), radius_rsun=float(radius[i]), logl=float(logl_[i]),
                                    teff_k=float(_teff(radius[i], logl_[i])), x=x, z=z,
                                    alpha_mlt=float("nan")), QUALITY_NO_SOLUTION)
    return out


def solve_alpha_to_core(mass_msun, radius_rsun, logl, z, core_mass_msun,
                        core_radius_rsun=DEFAULT_CORE_RADIUS_RSUN, x=None) -> EnvelopeResult:
    """Envelope of a giant with alpha solved so that the envelope meets the core.

    On the giant branch the solar alpha gives an envelope that runs out of mass
    above the core.  Here alpha is the root of core_mismatch(alpha) = 0, i.e.
    m(r_core) = M_core: scanned downward from alpha = 3.6 (the first sign change
    from the HIGH side is taken: a spurious low-alpha root exists), then refined
    and interpolated.  M_cz changes by only 1-2 % for core radii 0.01-0.1 R_sun.

    Parameters
    ----------
    mass_msun, radius_rsun, logl, z : float
        As in :func:`integrate_envelope`.
    core_mass_msun : float
        Helium core mass, M_sun (> 0).
    core_radius_rsun : float, optional
        Core radius, R_sun (default 0.03).
    x : float, optional
        Hydrogen mass fraction; default 0.76 - 3 Z.

    Returns
    -------
    EnvelopeResult
        ``quality`` ``alpha_solved``, or ``no_solution`` (values NaN) when no alpha
        in 0.8-3.6 lets a constant-L envelope meet the core (e.g. mid-subgiant
        points of analytic tracks, out of thermal equilibrium).

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, ch. 33 (red-giant envelopes on a compact core).
    """
    return solve_alphas_to_core(mass_msun, radius_rsun, logl, z, core_mass_msun, core_radius_rsun, x)[0]


def _teff(radius_rsun, logl):
    return (10.0**logl * L_SUN_ERG_S / (4.0 * np.pi * (radius_rsun * R_SUN_CM) ** 2 * SIGMA_SB_CGS)) ** 0.25


def _with_quality(result: EnvelopeResult, quality: str) -> EnvelopeResult:
    return replace(result, quality=quality)


# Codes of the ``envelope_quality`` column written by :func:`envelope_along_track`.
TRACK_QUALITY_OK = 0               # computed with the solar alpha
TRACK_QUALITY_ALPHA_SOLVED = 1     # computed with alpha solved so that the envelope meets the core
TRACK_QUALITY_INTERPOLATED = 2     # no constant-L solution here: interpolated along the track
TRACK_QUALITY_NO_SOLUTION = 3      # no solution and no computed neighbour on both sides: NaN
TRACK_QUALITY_STRIDE = 4           # not computed (eep_stride > 1): interpolated along the track
TRACK_QUALITY_HIT_CORE = 5         # surface zone reaches the inner boundary (values at the boundary)
TRACK_QUALITY_NOT_APPLICABLE = 6   # remnant or naked helium star (kstar >= 7): NaN
TRACK_QUALITY_NOT_COMPUTED = 7     # a track table without our envelope columns (old grid file, user table)
TRACK_QUALITY_SUPPLIED = 8         # envelope values taken from the user's own stellar models
TRACK_QUALITY_MEANINGS = {
    TRACK_QUALITY_OK: "solar mixing length",
    TRACK_QUALITY_ALPHA_SOLVED: "mixing length solved so the envelope meets the core",
    TRACK_QUALITY_INTERPOLATED: "no constant-luminosity envelope solution; interpolated along the track",
    TRACK_QUALITY_NO_SOLUTION: "no envelope solution and nothing to interpolate from",
    TRACK_QUALITY_STRIDE: "between computed points (eep_stride); interpolated along the track",
    TRACK_QUALITY_HIT_CORE: "convective envelope reaches the inner boundary",
    TRACK_QUALITY_NOT_APPLICABLE: "no envelope computed for remnants and helium stars",
    TRACK_QUALITY_NOT_COMPUTED: "not computed: the track table carries no envelope integration",
    TRACK_QUALITY_SUPPLIED: "supplied by the user's stellar models",
}
TRACK_COLUMNS = ("m_cz_msun", "r_bcz_rsun", "t_bcz_k", "rho_bcz_gcc", "m_li_preserved_msun", "alpha_mlt")
PROFILE_COLUMNS = ("profile_r_rsun", "profile_rho_gcc", "profile_t_k", "profile_m_msun")
_REQUIRED_TRACK_KEYS = ("mass_msun", "logr", "logl", "logteff", "core_mass_msun", "kstar")
_LAST_ENVELOPE_KSTAR = 6           # Hurley et al. 2000: 0-1 MS, 2 HG, 3 GB, 4 CHeB, 5-6 AGB
_HERTZSPRUNG_GAP_KSTAR = 2


def _track_row(result: EnvelopeResult):
    values = (result.m_cz_msun, result.r_bcz_rsun, result.t_bcz_k, result.rho_bcz_gcc,
              result.m_above_2p5mk_msun, result.alpha_mlt)
    profiles = (result.profile_r_rsun, result.profile_rho_gcc, result.profile_t_k, result.profile_m_msun)
    return values, profiles


def _fill_along_track(columns, profiles, quality, fill_codes):
    """Interpolate rows whose code is in ``fill_codes`` between computed rows on both sides.

    Positive quantities are interpolated in log (M_cz spans 1e-10 to 1 M_sun);
    alpha linearly.  Rows with a computed neighbour on one side only become NaN
    with :data:`TRACK_QUALITY_NO_SOLUTION`.
    """
    eep = np.arange(quality.size, dtype=float)
    known = np.isin(quality, (TRACK_QUALITY_OK, TRACK_QUALITY_ALPHA_SOLVED, TRACK_QUALITY_HIT_CORE))
    fill = np.isin(quality, fill_codes)
    if not fill.any():
        return
    k = np.flatnonzero(known)
    inside = fill & (k.size > 0) & (eep > (k.min() if k.size else 0)) & (eep < (k.max() if k.size else 0))
    for name, col in columns.items():
        good = known & np.isfinite(col) & ((col > 0) | (name == "alpha_mlt"))
        if good.sum() < 2:
            col[fill] = np.nan
            continue
        if name == "alpha_mlt":
            col[inside] = np.interp(eep[inside], eep[good], col[good])
        else:
            col[inside] = np.exp(np.interp(eep[inside], eep[good], np.log(col[good])))
        col[fill & ~inside] = np.nan
    for col in profiles.values():
        good = known & np.all(np.isfinite(col) & (col > 0), axis=1)
        for j in range(col.shape[1]):
            if good.sum() >= 2:
                col[inside, j] = np.exp(np.interp(eep[inside], eep[good], np.log(col[good, j])))
        col[fill & ~inside] = np.nan
    quality[fill & ~inside & (quality == TRACK_QUALITY_INTERPOLATED)] = TRACK_QUALITY_NO_SOLUTION
    quality[fill & ~inside & (quality == TRACK_QUALITY_STRIDE)] = TRACK_QUALITY_NO_SOLUTION


def rgb_bump_position(mass_msun, core_mass_msun, m_cz_msun, kstar) -> float:
    """Fractional track index of the RGB bump: the core reaches the deepest point of first dredge-up.

    The deepest mass coordinate mixed by the envelope is
    m_deep = min(M - M_cz) over the subgiant and giant branch (kstar 2-3); the bump
    is where the hydrogen shell, i.e. the core mass, reaches it on the giant branch
    (kstar 3), M_core = m_deep, found by linear interpolation in M_core between
    the two track points that bracket it.

    Parameters
    ----------
    mass_msun, core_mass_msun, m_cz_msun : array_like
        Along one track (M_sun).
    kstar : array_like
        Hurley et al. (2000) phase codes along the track.

    Returns
    -------
    float
        Fractional index into the track, NaN if the core never gets there (no bump,
        e.g. stars that ignite helium before, above ~2.2 M_sun).  The bump luminosity
        is very sensitive to m_deep: d log L/d M_core ~ 10 per M_sun on the lower
        giant branch, so 0.02 M_sun in m_deep moves it by ~0.2 dex.

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, ch. 32-33 (first dredge-up, the shell reaching
    the discontinuity); Christensen-Dalsgaard 2015, MNRAS 453, 666.
    """
    mass, core, m_cz, kstar = (np.asarray(a, dtype=float) for a in (mass_msun, core_mass_msun, m_cz_msun, kstar))
    fdu = np.isin(kstar, (2, 3)) & np.isfinite(m_cz)
    if not fdu.any():
        return float("nan")
    deepest = np.min((mass - m_cz)[fdu])
    reached = np.flatnonzero((kstar == 3) & (core >= deepest))
    if not reached.size:
        return float("nan")
    i = int(reached[0])
    if i == 0 or core[i] == deepest:
        return float(i)
    return float(i - 1 + np.clip((deepest - core[i - 1]) / (core[i] - core[i - 1]), 0.0, 1.0))


def rgb_bump_index(mass_msun, core_mass_msun, m_cz_msun, kstar) -> int:
    """Index of the first track point at or past the RGB bump (:func:`rgb_bump_position`).

    Parameters
    ----------
    mass_msun, core_mass_msun, m_cz_msun : array_like
        Along one track (M_sun).
    kstar : array_like
        Hurley et al. (2000) phase codes along the track.

    Returns
    -------
    int
        The first giant-branch point where M_core >= min(M - M_cz), or -1 if the
        core never gets there.

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, ch. 32-33.
    """
    position = rgb_bump_position(mass_msun, core_mass_msun, m_cz_msun, kstar)
    return -1 if np.isnan(position) else int(np.ceil(position))


def envelope_along_track(track: dict, z: float, alpha_solar: float, x: float | None = None,
                         eep_stride: int = 1, core_radius_rsun: float = DEFAULT_CORE_RADIUS_RSUN,
                         helium_burning_core_radius_rsun: float = HELIUM_BURNING_CORE_RADIUS_RSUN) -> dict:
    """Envelope columns for every point of one track, and the track's RGB-bump index.

    Rule per point (Hurley et al. 2000 phase code ``kstar``):

    - kstar 0-1 (main sequence): solar alpha, no core.
    - kstar 2 (Hertzsprung gap) with a core: solar alpha first, integrated down
      to the core (radius ``core_radius_rsun``).  Kept (code 0) if the envelope
      meets the core within the radii :data:`CORE_RADIUS_WINDOW_RSUN` (0.01-0.1
      R_sun, where M_cz changes by only 1-2 %) and its convective base lies above
      the core.  Otherwise alpha is solved so that the envelope meets the core
      (code 1, :func:`solve_alphas_to_core`).
    - kstar 3-6 (giant branch, core-He burning, AGB) with a core: alpha always
      solved so that the envelope meets the core (code 1; core radius
      ``core_radius_rsun`` up to the tip, ``helium_burning_core_radius_rsun``
      from core-He burning on).  The solar alpha is not tried first: there a
      constant-L envelope can also meet the core with a shallow convective zone
      over a radiative interior that holds most of the envelope's mass, a
      spurious solution for stars on the Hayashi line (measured in the built grid:
      whole giant branches at Z = 0.005-0.008 and red-clump stars had M_cz/(M -
      M_core) of 0.01-0.5 with it); the solve scans from the high-alpha side and
      finds the deep envelope.
    - no solution (mid-subgiant points of analytic tracks are out of thermal
      equilibrium): interpolated along the track between computed neighbours
      (code 2), in log for positive quantities; NaN if there is no computed point
      on one side (code 3).
    - kstar >= 7 (remnants, helium stars): NaN (code 6).

    Parameters
    ----------
    track : dict of str to ndarray
        One track along EEP: ``mass_msun`` (current mass), ``logr``, ``logl``,
        ``logteff`` (not used: T_eff follows from R and L), ``core_mass_msun``,
        ``kstar``.
    z : float
        Metal mass fraction of the track.
    alpha_solar : float
        Calibrated mixing length (:func:`calibrate_solar_alpha` at the grid's solar
        composition).
    x : float, optional
        Hydrogen mass fraction; default 0.76 - 3 Z.
    eep_stride : int or array_like of int, optional
        Compute every k-th point (plus the first and last point of each phase)
        and interpolate the rest along the track (code 4).  An array (one stride
        per track point) sets the stride per phase: point i is computed where
        i % eep_stride[i] == 0.
    core_radius_rsun : float, optional
        Core radius for the inner boundary up to the giant-branch tip (kstar <= 3),
        R_sun: a degenerate helium core.
    helium_burning_core_radius_rsun : float, optional
        Core radius from core helium burning on (kstar >= 4), R_sun: a
        non-degenerate helium-burning core, about the size of a helium star.

    Returns
    -------
    dict of str to ndarray
        ``m_cz_msun``, ``r_bcz_rsun``, ``t_bcz_k``, ``rho_bcz_gcc``,
        ``m_li_preserved_msun`` (mass above 2.5 MK), ``alpha_mlt``,
        ``envelope_quality`` (int8, :data:`TRACK_QUALITY_MEANINGS`), the
        (n_eep, 16) profiles ``profile_r_rsun``, ``profile_rho_gcc``,
        ``profile_t_k``, ``profile_m_msun`` (interior mass) at
        :data:`PROFILE_DEPTH_FRACTIONS`, and ``rgb_bump_eep`` (0-d int, -1 if none;
        :func:`rgb_bump_index`).  Planning estimates (see the module docstring).

    Raises
    ------
    ModelRangeError
        For a missing key, unequal lengths or an invalid stride.

    References
    ----------
    Hurley, Pols & Tout 2000, MNRAS 315, 543 (kstar codes); Kippenhahn, Weigert & Weiss
    2012, ch. 10-11 (envelope).
    """
    missing = [k for k in _REQUIRED_TRACK_KEYS if k not in track]
    if missing:
        raise ModelRangeError(f"track lacks the column(s) {missing}; need {list(_REQUIRED_TRACK_KEYS)}")
    arrays = {k: np.asarray(track[k], dtype=float).ravel() for k in _REQUIRED_TRACK_KEYS}
    n = arrays["mass_msun"].size
    if any(a.size != n for a in arrays.values()):
        raise ModelRangeError("every track column must have the same length (one value per EEP)")
    stride = np.asarray(eep_stride)
    if (stride.ndim > 1 or (stride.ndim == 1 and stride.size != n) or not np.issubdtype(stride.dtype, np.number)
            or np.any(stride != np.round(stride)) or np.any(stride < 1)):
        raise ModelRangeError(f"eep_stride must be a positive integer or one per track point; got {eep_stride!r}")
    stride = np.broadcast_to(stride.astype(int), (n,))
    mass, radius = arrays["mass_msun"], 10.0 ** arrays["logr"]
    logl, core, kstar = arrays["logl"], arrays["core_mass_msun"], arrays["kstar"].astype(int)
    columns = {name: np.full(n, np.nan) for name in TRACK_COLUMNS}
    profiles = {name: np.full((n, PROFILE_POINTS), np.nan) for name in PROFILE_COLUMNS}
    quality = np.full(n, TRACK_QUALITY_STRIDE, dtype=np.int8)

    usable = (kstar >= 0) & (kstar <= _LAST_ENVELOPE_KSTAR) & np.isfinite(mass + radius + logl) & (mass > 0)
    quality[~usable] = TRACK_QUALITY_NOT_APPLICABLE
    phase_edges = np.flatnonzero(np.diff(kstar) != 0)
    chosen = usable & ((np.arange(n) % stride == 0) | np.isin(np.arange(n), np.concatenate(
        [[0, n - 1], phase_edges, phase_edges + 1])))
    with_core = chosen & (kstar >= 2) & np.isfinite(core) & (core > 0) & (core < mass)
    core_radius = np.where(kstar >= 4, helium_burning_core_radius_rsun, core_radius_rsun)

    def store(indices, results, accept):
        for i, result in zip(indices, results):
            code = accept(result)
            if code is None:
                quality[i] = TRACK_QUALITY_INTERPOLATED
                continue
            values, profs = _track_row(result)
            for name, value in zip(TRACK_COLUMNS, values):
                columns[name][i] = value
            for name, prof in zip(PROFILE_COLUMNS, profs):
                profiles[name][i] = prof
            quality[i] = code

    def accept_main(result):
        return {QUALITY_OK: TRACK_QUALITY_OK, QUALITY_HIT_CORE: TRACK_QUALITY_HIT_CORE}.get(result.quality)

    plain = np.flatnonzero(chosen & ~with_core)
    if plain.size:
        store(plain, integrate_envelopes(mass[plain], radius[plain], logl[plain], z, alpha_solar, x=x), accept_main)
    cored = np.flatnonzero(with_core)
    gap = cored[kstar[cored] == _HERTZSPRUNG_GAP_KSTAR]
    if gap.size:
        first = integrate_envelopes(mass[gap], radius[gap], logl[gap], z, alpha_solar, x=x,
                                    core_mass_msun=core[gap], core_radius_rsun=core_radius[gap])
        store(gap, first, lambda r: TRACK_QUALITY_OK if r.quality == QUALITY_OK else None)
    if cored.size:
        retry = cored[(quality[cored] == TRACK_QUALITY_INTERPOLATED) | (kstar[cored] > _HERTZSPRUNG_GAP_KSTAR)]
        if retry.size:
            solved = solve_alphas_to_core(mass[retry], radius[retry], logl[retry], z, core[retry],
                                          core_radius[retry], x=x)
            store(retry, solved,
                  lambda r: TRACK_QUALITY_ALPHA_SOLVED if r.quality == QUALITY_ALPHA_SOLVED else None)
    _fill_along_track(columns, profiles, quality, (TRACK_QUALITY_INTERPOLATED, TRACK_QUALITY_STRIDE))
    out = dict(columns)
    out.update(profiles)
    out["envelope_quality"] = quality
    out["rgb_bump_eep"] = np.array(rgb_bump_index(mass, core, columns["m_cz_msun"], kstar))
    return out
