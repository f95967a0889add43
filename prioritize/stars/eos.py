"""Equation of state of stellar envelope gas: ideal gas + radiation + Saha ionisation.

The gas is a mixture of hydrogen (H I, H II), helium (He I, He II, He III), free
electrons and metals, plus black-body radiation.  Ionisation follows the Saha
equation with ground-state statistical weights; the entropy is the Sackur-Tetrode
sum over the particle species plus the radiation term, so every derivative
(adiabatic gradient, specific heat, expansion coefficient) is taken from one
thermodynamically consistent potential.

Simplifications, each small where the envelope integration uses the gas:

- metals are a single species of mean mass :data:`METAL_MEAN_AMU`, always fully
  ionised (Z/2 electrons per atomic mass unit).  This is right at depth; in cool
  photospheres it overstates the free electrons, which changes the particle
  number by < 1.5 % there;
- no pressure ionisation, no degeneracy, no Coulomb corrections: at the base of
  the solar convection zone Saha leaves ~1 % of hydrogen neutral where the real
  Sun has less, a < 1 % effect on the mean molecular weight;
- partition functions are ground-state weights only.

This module is used to BUILD the track grid (envelope integration), not at run
time.  Everything is vectorised numpy; nothing reads files.

References
----------
Kippenhahn, Weigert & Weiss 2012, *Stellar Structure and Evolution*, 2nd ed.,
ch. 13-14 (ideal gas with radiation, Saha equation, ionisation zones).
Hansen, Kawaler & Trimble 2004, *Stellar Interiors*, 2nd ed., ch. 3.
NIST Atomic Spectra Database ionisation energies (H 13.598 eV, He 24.587 and
54.418 eV).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from ..constants import (A_RAD_CGS, AMU_CGS, EV_ERG, H_PLANCK_CGS, K_B_CGS,
                         M_ELECTRON_CGS)
from ..errors import ModelRangeError

HYDROGEN_IONISATION_EV = 13.598434      # NIST ASD
HELIUM_FIRST_IONISATION_EV = 24.587389  # NIST ASD
HELIUM_SECOND_IONISATION_EV = 54.417765  # NIST ASD
HYDROGEN_AMU = 1.00794                  # IUPAC standard atomic weight
HELIUM_AMU = 4.002602                   # IUPAC standard atomic weight
METAL_MEAN_AMU = 16.0                   # mean atomic mass of the metal mixture (CNO-dominated; approximate)

# Pols et al. (1998) / Hurley, Pols & Tout (2000) composition law of the track grid:
# X = 0.76 - 3 Z, Y = 0.24 + 2 Z.
PRIMORDIAL_HYDROGEN = 0.76
HYDROGEN_PER_METAL = 3.0

# (2 pi m_e k / h^2)^(3/2): the electron quantum concentration is this times T^(3/2).
_ELECTRON_QUANTUM = (2.0 * np.pi * M_ELECTRON_CGS * K_B_CGS / H_PLANCK_CGS**2) ** 1.5
_NEWTON_ITERATIONS = 40
_CONVERGED = 1e-13


def hydrogen_mass_fraction(z):
    """Hydrogen mass fraction of the track grid's composition law.

    X = 0.76 - 3 Z (so Y = 0.24 + 2 Z), the law of the Pols et al. (1998) models
    that the Hurley, Pols & Tout (2000) track fits reproduce.

    Parameters
    ----------
    z : float or array_like
        Metal mass fraction, 0 <= Z <= 0.1.

    Returns
    -------
    ndarray
        X.

    References
    ----------
    Pols, Schröder, Hurley, Tout & Eggleton 1998, MNRAS 298, 525 (composition law,
    from memory).
    """
    z = np.asarray(z, dtype=float)
    if np.any(~np.isfinite(z)) or np.any(z < 0) or np.any(z > 0.1):
        raise ModelRangeError(f"metal mass fraction Z must lie in [0, 0.1]; got {z!r}")
    return PRIMORDIAL_HYDROGEN - HYDROGEN_PER_METAL * z


def check_composition(x: float, z: float) -> None:
    """Raise :class:`ModelRangeError` unless 0 <= X, 0 <= Z and X + Z <= 1."""
    if not (np.isfinite(x) and np.isfinite(z) and x >= 0 and z >= 0 and x + z <= 1):
        raise ModelRangeError(
            f"composition X={x!r}, Z={z!r} is impossible: need X >= 0, Z >= 0 and X + Z <= 1")


class GasState(NamedTuple):
    """Thermodynamic state returned by :func:`gas_state` (all arrays, cgs)."""

    rho_gcc: np.ndarray             # density, g cm^-3
    electrons_per_amu: np.ndarray   # free electrons per atomic mass unit of gas
    hydrogen_ionised: np.ndarray    # n(H II) / n(H)
    helium_single: np.ndarray       # n(He II) / n(He)
    helium_double: np.ndarray       # n(He III) / n(He)
    entropy_erg_g_k: np.ndarray     # specific entropy, erg g^-1 K^-1 (additive constant fixed)


def _log_saha_constants(t_k):
    """ln K for the three ionisations, K = n_e n_(i+1)/n_i in cm^-3.

    K = 2 (g_(i+1)/g_i) (2 pi m_e k T/h^2)^(3/2) exp(-chi/kT), ground-state weights
    g(H I)=2, g(H II)=1, g(He I)=1, g(He II)=2, g(He III)=1.
    """
    kt_ev = K_B_CGS * t_k / EV_ERG
    ln_quantum = np.log(_ELECTRON_QUANTUM) + 1.5 * np.log(t_k)
    ln_k_h = ln_quantum - HYDROGEN_IONISATION_EV / kt_ev                       # 2 * 1/2
    ln_k_he1 = ln_quantum + np.log(4.0) - HELIUM_FIRST_IONISATION_EV / kt_ev   # 2 * 2/1
    ln_k_he2 = ln_quantum - HELIUM_SECOND_IONISATION_EV / kt_ev                # 2 * 1/2
    return ln_k_h, ln_k_he1, ln_k_he2


def _ionisation(ln_ne, ln_k_h, ln_k_he1, ln_k_he2):
    """Ionised fractions and d(electrons from H, He)/d ln n_e, overflow-safe."""
    y = 1.0 / (1.0 + np.exp(np.clip(ln_ne - ln_k_h, -700, 700)))
    ln_a = ln_k_he1 - ln_ne
    ln_b = ln_k_he1 + ln_k_he2 - 2.0 * ln_ne
    top = np.maximum(0.0, np.maximum(ln_a, ln_b))
    w0, w1, w2 = np.exp(-top), np.exp(ln_a - top), np.exp(ln_b - top)
    norm = w0 + w1 + w2
    f0, f1, f2 = w0 / norm, w1 / norm, w2 / norm
    # d y/d ln n_e = -y (1 - y); d(f1 + 2 f2)/d ln n_e = -(f1 + 4 f2) + (f1 + 2 f2)^2
    dy = -y * (1.0 - y)
    he_electrons = f1 + 2.0 * f2
    dhe = -(f1 + 4.0 * f2) + he_electrons**2
    return y, f0, f1, f2, dy, dhe


def gas_state(t_k, p_dyn_cm2, x: float, z: float) -> GasState:
    """Density, ionisation and entropy of envelope gas at given temperature and pressure.

    Solves, per point, P = (n_nuclei + n_e) k T + a T^4 / 3 together with the Saha
    equations

        n_e n(H II)/n(H I) = (2 pi m_e k T/h^2)^(3/2) exp(-13.598 eV/kT)
        n_e n(He II)/n(He I) = 4 (2 pi m_e k T/h^2)^(3/2) exp(-24.587 eV/kT)
        n_e n(He III)/n(He II) = (2 pi m_e k T/h^2)^(3/2) exp(-54.418 eV/kT)

    for the free-electron number (safeguarded Newton iteration in the electron number
    per atomic mass unit), then evaluates the Sackur-Tetrode entropy

        s = (k/m_u) sum_i nu_i [5/2 + ln(g_i (2 pi m_i k T/h^2)^(3/2) / n_i)] + 4 a T^3/(3 rho),

    with nu_i the number of particles of species i per atomic mass unit.

    Parameters
    ----------
    t_k : array_like
        Temperature, K (valid ~2,000 K to ~1e8 K; no molecules, no degeneracy).
    p_dyn_cm2 : array_like
        Total (gas + radiation) pressure, dyn cm^-2.  Points where radiation alone
        exceeds it come back NaN.
    x, z : float
        Hydrogen and metal mass fractions (helium is the rest).

    Returns
    -------
    GasState
        Arrays of the broadcast shape of the inputs.

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, eqs. 14.11-14.17 (Saha equation) and
    ch. 13 (ideal gas with radiation).  Planning-grade model physics.
    """
    check_composition(x, z)
    t_k, p = np.broadcast_arrays(np.asarray(t_k, dtype=float), np.asarray(p_dyn_cm2, dtype=float))
    y_he = 1.0 - x - z
    nu_h, nu_he, nu_z = x / HYDROGEN_AMU, y_he / HELIUM_AMU, z / METAL_MEAN_AMU
    nu_metal_electrons = 0.5 * z
    nu_nuclei = nu_h + nu_he + nu_z
    p_gas = p - A_RAD_CGS * t_k**4 / 3.0
    valid = (p_gas > 0) & np.isfinite(p_gas) & (t_k > 0)
    ln_n_total = np.log(np.where(valid, p_gas, 1.0) / (K_B_CGS * np.where(t_k > 0, t_k, 1.0)))
    ln_k_h, ln_k_he1, ln_k_he2 = _log_saha_constants(np.where(t_k > 0, t_k, 1.0))

    # Electrons per amu lie between the metal electrons alone and full ionisation;
    # g(nu) = nu - nu_e(n_e(nu)) increases monotonically between these bounds.
    lo = np.full(t_k.shape, nu_metal_electrons + 1e-300)
    hi = np.full(t_k.shape, nu_metal_electrons + nu_h + 2.0 * nu_he)
    nu = np.sqrt(lo * hi) if nu_metal_electrons > 0 else 0.5 * hi
    for _ in range(_NEWTON_ITERATIONS):
        ln_ne = np.log(nu) - np.log(nu_nuclei + nu) + ln_n_total
        y, f0, f1, f2, dy, dhe = _ionisation(ln_ne, ln_k_h, ln_k_he1, ln_k_he2)
        g = nu - (nu_metal_electrons + nu_h * y + nu_he * (f1 + 2.0 * f2))
        # d ln n_e/d nu = 1/nu - 1/(nu_nuclei + nu)
        dlnne = 1.0 / nu - 1.0 / (nu_nuclei + nu)
        dg = 1.0 - (nu_h * dy + nu_he * dhe) * dlnne
        lo = np.where(g < 0, nu, lo)
        hi = np.where(g > 0, nu, hi)
        step = nu - g / dg
        outside = ~((step > lo) & (step < hi))
        new = np.where(outside, 0.5 * (lo + hi), step)
        done = np.abs(new - nu) <= _CONVERGED * nu
        nu = new
        if np.all(done | ~valid):
            break
    ln_ne = np.log(nu) - np.log(nu_nuclei + nu) + ln_n_total
    y, f0, f1, f2, _, _ = _ionisation(ln_ne, ln_k_h, ln_k_he1, ln_k_he2)
    nu_total = nu_nuclei + nu
    rho = np.exp(ln_n_total) / nu_total * AMU_CGS

    # Sackur-Tetrode: nu_i [5/2 + ln(g_i n_Q,i / n_i)], n_i = nu_i rho/m_u.  The heavy
    # particles' quantum concentrations differ only by constants that cancel in every
    # derivative, so one reference mass (m_u) serves; electrons carry their own mass.
    ln_rho_amu = np.log(rho / AMU_CGS)
    ln_t32 = 1.5 * np.log(t_k)
    ln_q_heavy = np.log((2.0 * np.pi * AMU_CGS * K_B_CGS / H_PLANCK_CGS**2) ** 1.5) + ln_t32
    ln_q_e = np.log(_ELECTRON_QUANTUM) + ln_t32
    species = (
        (nu_h * (1.0 - y), 2.0, ln_q_heavy + 1.5 * np.log(HYDROGEN_AMU)),
        (nu_h * y, 1.0, ln_q_heavy + 1.5 * np.log(HYDROGEN_AMU)),
        (nu_he * f0, 1.0, ln_q_heavy + 1.5 * np.log(HELIUM_AMU)),
        (nu_he * f1, 2.0, ln_q_heavy + 1.5 * np.log(HELIUM_AMU)),
        (nu_he * f2, 1.0, ln_q_heavy + 1.5 * np.log(HELIUM_AMU)),
        (np.full(t_k.shape, nu_z), 1.0, ln_q_heavy + 1.5 * np.log(METAL_MEAN_AMU)),
        (nu, 2.0, ln_q_e),
    )
    s_over_k = np.zeros(t_k.shape)
    for n_i, weight, ln_q in species:
        safe = np.maximum(n_i, 1e-300)
        s_over_k += np.where(n_i > 0, n_i * (2.5 + np.log(weight) + ln_q - np.log(safe) - ln_rho_amu), 0.0)
    entropy = s_over_k * K_B_CGS / AMU_CGS + 4.0 * A_RAD_CGS * t_k**3 / (3.0 * rho)

    nan = np.where(valid, 1.0, np.nan)
    return GasState(rho * nan, nu * nan, y * nan, f1 * nan, f2 * nan, entropy * nan)


def adiabatic_gradient(t_k, p_dyn_cm2, x: float, z: float, step: float = 1e-4):
    """Adiabatic temperature gradient nabla_ad = (d ln T/d ln P)_s from the entropy.

    nabla_ad = -(ds/d ln P)_T / (ds/d ln T)_P, both derivatives by central differences
    of :func:`gas_state`'s entropy with relative step ``step``.  Equals 0.4 for a
    monatomic ideal gas without ionisation or radiation; drops to ~0.1 in the middle
    of the hydrogen ionisation zone (pure hydrogen, KWW eq. 14.23).

    Parameters
    ----------
    t_k, p_dyn_cm2 : array_like
        Temperature (K) and total pressure (dyn cm^-2).
    x, z : float
        Hydrogen and metal mass fractions.
    step : float, optional
        Relative finite-difference step in T and P.

    Returns
    -------
    ndarray
        nabla_ad (dimensionless).

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, ch. 14.3 (adiabatic gradient in ionisation
    zones).
    """
    t_k, p = np.broadcast_arrays(np.asarray(t_k, dtype=float), np.asarray(p_dyn_cm2, dtype=float))
    up, down = np.exp(step), np.exp(-step)
    s_t = (gas_state(t_k * up, p, x, z).entropy_erg_g_k - gas_state(t_k * down, p, x, z).entropy_erg_g_k)
    s_p = (gas_state(t_k, p * up, x, z).entropy_erg_g_k - gas_state(t_k, p * down, x, z).entropy_erg_g_k)
    return -s_p / s_t


@dataclass(frozen=True)
class EOSTable:
    """Equation of state tabulated on a regular (log10 T, log10 P) grid.

    Attributes
    ----------
    log_t, log_p : ndarray
        Regular axes: log10 temperature (K) and log10 total pressure (dyn cm^-2).
    ln_rho : ndarray
        ln density (g cm^-3), shape (len(log_t), len(log_p)); NaN where P < a T^4/3.
    nabla_ad : ndarray
        Adiabatic gradient (d ln T/d ln P)_s.
    c_p : ndarray
        Specific heat at constant pressure, T (ds/dT)_P, erg g^-1 K^-1.
    delta : ndarray
        -(d ln rho/d ln T)_P.
    x, z : float
        Composition.
    """

    log_t: np.ndarray
    log_p: np.ndarray
    ln_rho: np.ndarray
    nabla_ad: np.ndarray
    c_p: np.ndarray
    delta: np.ndarray
    x: float
    z: float


def tabulate_eos(x: float, z: float, log_t, log_p) -> EOSTable:
    """Tabulate :func:`gas_state` and its derivatives on a regular grid.

    c_P = (ds/d ln T)_P, nabla_ad = -(ds/d ln P)_T / c_P and
    delta = -(d ln rho/d ln T)_P are second-order finite differences of the
    tabulated entropy and density along the grid axes (``numpy.gradient``), so
    they are thermodynamically consistent with the density.  A grid step of
    0.01 dex in T reproduces the directly differentiated nabla_ad to ~1e-3.

    Parameters
    ----------
    x, z : float
        Hydrogen and metal mass fractions.
    log_t, log_p : array_like
        Regularly spaced, increasing axes: log10 T (K) and log10 P (dyn cm^-2).

    Returns
    -------
    EOSTable

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, eqs. 4.21 and 6.7 (c_P, delta, nabla_ad =
    P delta/(T rho c_P)).
    """
    log_t = np.asarray(log_t, dtype=float)
    log_p = np.asarray(log_p, dtype=float)
    for name, axis in (("log_t", log_t), ("log_p", log_p)):
        steps = np.diff(axis)
        if axis.ndim != 1 or axis.size < 3 or np.any(steps <= 0) or np.ptp(steps) > 1e-9 * abs(steps[0]):
            raise ModelRangeError(f"{name} must be a regularly spaced increasing axis of >= 3 values")
    tt, pp = np.meshgrid(10.0**log_t, 10.0**log_p, indexing="ij")
    state = gas_state(tt, pp, x, z)
    ln10 = np.log(10.0)
    ln_rho = np.log(state.rho_gcc)
    ds_dlnt, ds_dlnp = np.gradient(state.entropy_erg_g_k, log_t * ln10, log_p * ln10, edge_order=2)
    dlnrho_dlnt = np.gradient(ln_rho, log_t * ln10, axis=0, edge_order=2)
    return EOSTable(log_t=log_t, log_p=log_p, ln_rho=ln_rho, nabla_ad=-ds_dlnp / ds_dlnt,
                    c_p=ds_dlnt, delta=-dlnrho_dlnt, x=float(x), z=float(z))
