"""Lithium burning at the base of a convective envelope (planning estimates).

Surface lithium is destroyed by 7Li(p,alpha)4He where the envelope reaches
T >~ 2.5 MK (Pompéia et al. 2002, arXiv:astro-ph/0201472).  The chain, one function per step:

1. :func:`rate_cf88` -- the reaction rate N_A<sigma v> (Caughlan & Fowler 1988);
2. :func:`weak_screening_factor` -- its enhancement by electron and ion screening
   (Salpeter 1954, weak limit);
3. :func:`li_destruction_timescale_yr` -- the local lifetime of a 7Li nucleus;
4. :func:`burning_rate_exponent` and :func:`hot_layer_mass` -- the mass of the hot
   layer at the convective base where the burning happens;
5. :func:`surface_li_timescale_yr` -- the e-folding time of the envelope's (and so
   the surface's) lithium;
6. :func:`burning_lifetime_myr` -- how long an engulfment excess stays above a
   significance threshold while it burns.

Every function is vectorised (numpy broadcasting); NaN inputs give NaN outputs, so
rows of a batch that failed upstream pass through.  The rate's steep temperature
dependence (nu ~ 20 at 2.5 MK) makes every timescale here uncertain: a 5% error in
T_bcz changes it by a factor ~2.7.  These are planning estimates.
"""

from __future__ import annotations

import numpy as np

from ..constants import (AMU_H, AVOGADRO, E_CHARGE_ESU, G_CGS, K_B_CGS, M_H_CGS, M_SUN_G,
                         R_SUN_CM, SECONDS_PER_YEAR, Z_SUN_TRACKS)
from ..errors import ModelRangeError

CF88_MAX_T9 = 10.0              # upper end of the CF88 fits (T9 <= 10; from memory)

# Salpeter's weak-screening coefficient, e^3 (4 pi N_A)^(1/2) k^(-3/2) in units of
# (g cm^-3)^(-1/2) MK^(3/2): the 0.188 of Salpeter (1954) and Clayton (1968, eq. 4-221).
SALPETER_COEFFICIENT = (E_CHARGE_ESU ** 3 * np.sqrt(4.0 * np.pi * AVOGADRO)
                        / (K_B_CGS * 1e6) ** 1.5)
# (Z_i^2 + Z_i)/A_i per unit mass fraction: H 2, 4He 1.5, and metals taken as fully
# ionised 16O, (64 + 8)/16 = 4.5 (the solar mix gives ~5; metals add < 10% to zeta^2).
ZETA_SQUARED_H, ZETA_SQUARED_HE, ZETA_SQUARED_METALS = 2.0, 1.5, 4.5

MU_IONISED = 0.6                # mean molecular weight of a fully ionised X ~ 0.7 gas
_LN_T_STEP = 1e-4               # step in ln T of the numerical derivative of the rate


def _positive(name: str, func: str, values) -> np.ndarray:
    """``values`` as floats; NaN passes, any other entry must be finite and > 0."""
    arr = np.asarray(values, dtype=float)
    bad = ~np.isnan(arr) & ~(np.isfinite(arr) & (arr > 0))
    if np.any(bad):
        raise ModelRangeError(f"{func}: {name} must be finite and > 0 (NaN marks an unknown "
                              f"value); got {arr[bad][:3]}")
    return arr


def rate_cf88(t9):
    """Thermonuclear rate N_A<sigma v> of 7Li(p,alpha)4He (Caughlan & Fowler 1988).

    .. math::

        N_A\\langle\\sigma v\\rangle = 1.096\\times10^9\\,T_9^{-2/3} e^{-8.472\\,T_9^{-1/3}}
        - 4.830\\times10^8\\,T_{9a}^{5/6} T_9^{-3/2} e^{-8.472\\,T_{9a}^{-1/3}}
        + 1.06\\times10^{10}\\,T_9^{-3/2} e^{-30.442/T_9},

    with T9a = T9 / (1 + 0.759 T9).

    Parameters
    ----------
    t9 : array_like
        Temperature in 10^9 K (0 < T9 <= 10).

    Returns
    -------
    ndarray
        N_A<sigma v> in cm^3 mol^-1 s^-1 (unscreened).

    Raises
    ------
    ModelRangeError
        For T9 <= 0 or T9 > 10.

    Notes
    -----
    Fits are given for T9 <= 10 (from memory).  Over 1.5-3.5 MK this rate is
    0.806-0.809 times the newer REACLIB fit (Descouvemont et al. 2004, as shipped with
    pynucastro 3.1; measured in ``tests/test_burning.py``), so lifetimes from it are
    ~24% longer.

    References
    ----------
    Caughlan, G. R. & Fowler, W. A. 1988, Atomic Data and Nuclear Data Tables 40, 283.
    """
    t9 = _positive("t9", "rate_cf88", t9)
    if np.any(t9 > CF88_MAX_T9):
        raise ModelRangeError(f"rate_cf88: the fit holds for T9 <= {CF88_MAX_T9}; got "
                              f"T9 = {np.nanmax(t9):g}")
    t9a = t9 / (1.0 + 0.759 * t9)
    return (1.096e9 * t9 ** (-2.0 / 3.0) * np.exp(-8.472 * t9 ** (-1.0 / 3.0))
            - 4.830e8 * t9a ** (5.0 / 6.0) * t9 ** -1.5 * np.exp(-8.472 * t9a ** (-1.0 / 3.0))
            + 1.06e10 * t9 ** -1.5 * np.exp(-30.442 / t9))


def weak_screening_factor(t_k, rho_gcc, x, y, z_1=1, z_2=3):
    """Weak (Debye-Hueckel) screening enhancement of a charged-particle reaction rate.

    .. math::

        f = \\exp\\left(0.188\\, Z_1 Z_2\\, \\zeta\\, \\rho^{1/2} T_6^{-3/2}\\right),
        \\qquad \\zeta^2 = \\sum_i \\frac{(Z_i^2 + Z_i) X_i}{A_i}
        \\approx 2X + 1.5Y + 4.5(1 - X - Y),

    where 0.188 = e^3 (4 pi N_A)^(1/2) / k^(3/2) in cgs with T in MK
    (:data:`SALPETER_COEFFICIENT`), the Z_i term counts the electrons (non-degenerate,
    theta_e = 1) and the metals are taken as fully ionised 16O.

    Parameters
    ----------
    t_k : array_like
        Temperature (K).
    rho_gcc : array_like
        Density (g cm^-3).
    x, y : array_like
        Hydrogen and helium mass fractions; metals are 1 - X - Y.
    z_1, z_2 : int
        Charges of the reacting nuclei (default p + 7Li: 1 and 3).

    Returns
    -------
    ndarray
        Factor f >= 1 that multiplies the unscreened rate.

    Notes
    -----
    Valid while the exponent H = 0.188 Z1 Z2 zeta rho^(1/2) T6^(-3/2) << 1 (Debye
    length much larger than the distance between ions).  For 7Li + p at the present
    Sun's convective base (2.2 MK, 0.19 g cm^-3) H ~ 0.10 and f ~ 1.11; at 2 MK and
    1 g cm^-3, H ~ 0.28.  Beyond H ~ 0.5 intermediate screening (Graboske et al. 1973)
    would be needed; the envelopes this package models stay below that.

    References
    ----------
    Salpeter, E. E. 1954, Australian Journal of Physics 7, 373.
    Clayton, D. D. 1968, Principles of Stellar Evolution and Nucleosynthesis, §4-8
    (from memory).
    """
    t_k = _positive("t_k", "weak_screening_factor", t_k)
    rho = _positive("rho_gcc", "weak_screening_factor", rho_gcc)
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    if np.any((x < 0) | (y < 0) | (x + y > 1)):
        raise ModelRangeError("weak_screening_factor: need mass fractions X >= 0, Y >= 0 "
                              "and X + Y <= 1")
    zeta = np.sqrt(ZETA_SQUARED_H * x + ZETA_SQUARED_HE * y
                   + ZETA_SQUARED_METALS * (1.0 - x - y))
    exponent = SALPETER_COEFFICIENT * z_1 * z_2 * zeta * np.sqrt(rho) * (t_k / 1e6) ** -1.5
    return np.exp(exponent)


def li_destruction_timescale_yr(t_k, rho_gcc, x=0.7, screening=True, *, z=Z_SUN_TRACKS):
    """Local lifetime of a 7Li nucleus against proton capture.

    .. math::

        \\tau = \\left[\\frac{\\rho X N_A\\langle\\sigma v\\rangle f}{m_H/\\mathrm{u}}
        \\right]^{-1},

    with m_H/u = 1.008, N_A<sigma v> from :func:`rate_cf88` and f from
    :func:`weak_screening_factor` (f = 1 without screening).

    Parameters
    ----------
    t_k : array_like
        Temperature (K), up to 10^10 K.
    rho_gcc : array_like
        Density (g cm^-3).
    x : array_like
        Hydrogen mass fraction.
    screening : bool
        Apply weak screening.
    z : float
        Metal mass fraction, used only for the screening (Y = 1 - X - Z).

    Returns
    -------
    ndarray
        e-folding time of the local 7Li abundance, in years (a planning estimate).

    References
    ----------
    Caughlan & Fowler 1988, ADNDT 40, 283 (check table in tests/test_burning.py, no screening).
    """
    t_k = _positive("t_k", "li_destruction_timescale_yr", t_k)
    rho = _positive("rho_gcc", "li_destruction_timescale_yr", rho_gcc)
    x = np.asarray(x, dtype=float)
    rate = rate_cf88(t_k / 1e9)
    if screening:
        rate = rate * weak_screening_factor(t_k, rho, x, 1.0 - x - z)
    with np.errstate(divide="ignore"):
        return AMU_H / (rho * x * rate) / SECONDS_PER_YEAR


def burning_rate_exponent(t_k, rho_gcc, x=0.7, screening=True, *, z=Z_SUN_TRACKS):
    """Temperature exponent nu = d ln(lambda) / d ln T of the 7Li burning rate at fixed rho.

    Evaluated numerically (central difference, step 1e-4 in ln T) from
    :func:`li_destruction_timescale_yr`, lambda = 1/tau.  For a non-resonant rate
    nu ~ B/(3 T9^(1/3)) - 2/3 with B = 8.472, i.e. ~20 at 2.5 MK.

    Parameters
    ----------
    t_k, rho_gcc, x, screening, z
        As for :func:`li_destruction_timescale_yr`.

    Returns
    -------
    ndarray
        nu (dimensionless).

    References
    ----------
    Clayton 1968, Principles of Stellar Evolution and Nucleosynthesis, eq. 4-86
    (the Gamow-peak exponent; from memory).
    """
    t_k = _positive("t_k", "burning_rate_exponent", t_k)
    up, down = (li_destruction_timescale_yr(t_k * np.exp(s * _LN_T_STEP), rho_gcc, x,
                                            screening, z=z) for s in (1.0, -1.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        return (np.log(down) - np.log(up)) / (2.0 * _LN_T_STEP)


def hot_layer_mass(r_bcz_rsun, rho_bcz_gcc, t_bcz_k, mass_msun, nabla_ad=0.4, nu=None, n=1.5,
                   *, mu=MU_IONISED):
    """Effective mass of the hot layer at the convective base where lithium burns.

    .. math::

        \\Delta M_\\mathrm{hot} = \\frac{\\int \\lambda\\, dm}{\\lambda_b}
        \\approx \\frac{4\\pi r_b^2 \\rho_b H_P}{\\nabla_\\mathrm{ad}(\\nu + 2n + 1)},
        \\qquad H_P = \\frac{k T_b}{\\mu m_H g}, \\quad g = \\frac{G M_r}{r_b^2}.

    Going outward from the base along the adiabat d ln T = nabla_ad d ln P the density
    falls as rho ~ T^n, the burning rate per nucleus as lambda ~ rho T^nu and
    H_P ~ T; the integral of lambda dm = 4 pi r^2 rho H_P d ln P over the layer then
    gives the (nu + 2n + 1) in the denominator (r, g held at their base values: the
    layer is thin for nu ~ 20).

    Parameters
    ----------
    r_bcz_rsun : array_like
        Radius of the convective base (R_sun).
    rho_bcz_gcc : array_like
        Density there (g cm^-3).
    t_bcz_k : array_like
        Temperature there (K).
    mass_msun : array_like
        Mass inside r_bcz (M_sun); :func:`surface_li_timescale_yr` passes M - M_cz.
    nabla_ad : float
        Adiabatic gradient (0.4 for a fully ionised ideal gas).
    nu : array_like, optional
        d ln lambda / d ln T; by default :func:`burning_rate_exponent` at the base.
    n : float
        Polytropic index of the adiabat, rho ~ T^n (1.5 = 1/nabla_ad - 1).
    mu : float
        Mean molecular weight of the ideal gas giving the pressure (0.6, fully ionised
        gas with X ~ 0.7: 4/(3 + 5X - Z) = 0.62).

    Returns
    -------
    ndarray
        Delta M_hot in M_sun.

    Notes
    -----
    Valid for a convective base hot enough that nu >> 1 (T_bcz >~ 1 MK) and an
    envelope whose base is an ideal, fully ionised gas (radiation pressure neglected).

    References
    ----------
    Kippenhahn, Weigert & Weiss, Stellar Structure and Evolution, ch. 6-7 (pressure
    scale height, adiabatic stratification; from memory).
    """
    func = "hot_layer_mass"
    r_cm = _positive("r_bcz_rsun", func, r_bcz_rsun) * R_SUN_CM
    rho = _positive("rho_bcz_gcc", func, rho_bcz_gcc)
    t_k = _positive("t_bcz_k", func, t_bcz_k)
    m_g = _positive("mass_msun", func, mass_msun) * M_SUN_G
    if nu is None:
        nu = burning_rate_exponent(t_k, rho)
    gravity = G_CGS * m_g / r_cm ** 2
    scale_height = K_B_CGS * t_k / (mu * M_H_CGS * gravity)
    mass_g = 4.0 * np.pi * r_cm ** 2 * rho * scale_height / (nabla_ad * (nu + 2.0 * n + 1.0))
    return mass_g / M_SUN_G


def surface_li_timescale_yr(t_bcz_k, rho_bcz_gcc, r_bcz_rsun, m_cz_msun, mass_msun, x=0.7):
    """e-folding time of the surface lithium of a fully mixed convective envelope.

    .. math::

        \\tau_\\mathrm{surf} = \\tau_\\mathrm{local}(T_\\mathrm{bcz}, \\rho_\\mathrm{bcz})
        \\times \\max\\left(\\frac{M_\\mathrm{cz}}{\\Delta M_\\mathrm{hot}}, 1\\right),

    with tau_local from :func:`li_destruction_timescale_yr` (screened) and Delta M_hot
    from :func:`hot_layer_mass` with the mass inside the base, M - M_cz.  The ratio is
    held at >= 1: a zone thinner than its hot layer burns at most at the local rate.

    Parameters
    ----------
    t_bcz_k, rho_bcz_gcc, r_bcz_rsun : array_like
        Temperature (K), density (g cm^-3) and radius (R_sun) of the convective base.
    m_cz_msun : array_like
        Mass of the convective envelope (M_sun).
    mass_msun : array_like
        Total stellar mass (M_sun).
    x : array_like
        Hydrogen mass fraction of the envelope.

    Returns
    -------
    ndarray
        tau_surf in years: a planning estimate, uncertain by a factor ~3 for each 5% in
        T_bcz.  Standard (no extra mixing) physics: the present Sun
        (2.2 MK, 0.19 g cm^-3, 0.713 R_sun, 0.025 M_sun) gives ~1e12 yr, far longer than
        the ~1 Gyr its observed depletion implies -- the known shortfall of standard
        models, which leave the destruction to extra mixing below the envelope.

    References
    ----------
    Caughlan & Fowler 1988, ADNDT 40, 283; Kippenhahn, Weigert & Weiss, Stellar Structure
    and Evolution, ch. 6-7 (the hot layer, :func:`hot_layer_mass`).
    """
    func = "surface_li_timescale_yr"
    m_cz = _positive("m_cz_msun", func, m_cz_msun)
    mass = _positive("mass_msun", func, mass_msun)
    if np.any(m_cz >= mass):
        raise ModelRangeError(f"{func}: the convective envelope mass must be below the "
                              "stellar mass")
    tau_local = li_destruction_timescale_yr(t_bcz_k, rho_bcz_gcc, x)
    hot = hot_layer_mass(r_bcz_rsun, rho_bcz_gcc, t_bcz_k, mass - m_cz)
    return tau_local * np.maximum(m_cz / hot, 1.0)


def burning_lifetime_myr(z_now, z_threshold, a_enrichment_dex, tau_surf_yr):
    """Time until burning brings an engulfment signature below the significance threshold.

    The planet's extra lithium atoms, in number, decay as exp(-t/tau_surf) against a
    fixed baseline (the baseline's own evolution belongs to the baseline model), so

    .. math::

        \\Delta A(t) = \\log_{10}\\left[1 + (10^{\\Delta A_0} - 1)\\,e^{-t/\\tau}\\right],
        \\qquad z(t) = \\Delta A(t)/\\sigma, \\quad \\sigma = \\Delta A_0 / z_\\mathrm{now}.

    z(t) = z_th at

    .. math::

        t = \\tau \\ln\\frac{10^{\\Delta A_0} - 1}{10^{\\Delta A_\\mathrm{th}} - 1},
        \\qquad \\Delta A_\\mathrm{th} = \\Delta A_0\\, z_\\mathrm{th} / z_\\mathrm{now}.

    Parameters
    ----------
    z_now : array_like
        Significance of the signature now.
    z_threshold : array_like
        Significance that counts as a signature.
    a_enrichment_dex : array_like
        Abundance excess now, Delta A_0 = A_new - A_base (dex).
    tau_surf_yr : array_like
        e-folding time of the surface lithium (yr), e.g. from
        :func:`surface_li_timescale_yr`.

    Returns
    -------
    ndarray
        Lifetime in Myr (a planning estimate): 0 where z_now <= z_threshold, inf where
        the threshold is <= 0 or tau is infinite.

    References
    ----------
    Caughlan & Fowler 1988, ADNDT 40, 283 (the rate behind tau_surf,
    :func:`surface_li_timescale_yr`).
    """
    z_now = np.asarray(z_now, dtype=float)
    z_th = np.asarray(z_threshold, dtype=float)
    delta_a0 = np.asarray(a_enrichment_dex, dtype=float)
    tau = np.asarray(tau_surf_yr, dtype=float)
    if np.any(tau <= 0):
        raise ModelRangeError("burning_lifetime_myr: tau_surf_yr must be > 0")
    with np.errstate(divide="ignore", invalid="ignore"):
        delta_a_th = delta_a0 * z_th / z_now
        t_yr = tau * np.log(np.expm1(delta_a0 * np.log(10.0)) / np.expm1(delta_a_th * np.log(10.0)))
    t_yr = np.where(z_th <= 0, np.inf, t_yr)
    t_yr = np.where(z_now <= z_th, 0.0, t_yr)
    unknown = np.isnan(z_now) | np.isnan(z_th) | np.isnan(delta_a0) | np.isnan(tau)
    return np.where(unknown, np.nan, t_yr / 1e6)
