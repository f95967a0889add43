"""Surface lithium after a planet is mixed into the convective envelope.

Atom counting (from the definition A(X) = 12 + log10(N_X/N_H)): the star's envelope and
the planet each bring hydrogen and lithium atoms; the new abundance is the ratio of the sums,

    A_new = 12 + log10[(N_Li,* + N_Li,p) / (N_H,* + N_H,p)]

with N_H,* = X_* M_cz / m_H, N_Li,* = N_H,* 10^(A_* - 12) and, for the planet,
gas giants and brown dwarfs: N_H,p = X_p M_p / m_H, N_Li,p = N_H,p 10^(A_p - 12);
rocky bodies: N_H,p = 0, N_Li,p = w_Li M_p / m_Li.

Masses are in solar masses and atom numbers in units of M_sun / u; the unit cancels
in every ratio.  The mixing is linear in the planet mass before the logarithm, so the
minimum planet for a given abundance rise inverts exactly (:func:`planet_mass_for_abundance`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..constants import AMU_H, AMU_LI, M_JUP_MSUN

GAS_KINDS = ("gas_giant", "brown_dwarf")


@dataclass(frozen=True)
class PlanetComposition:
    """Hydrogen and lithium content per unit planet mass.

    Parameters
    ----------
    kind : {"gas_giant", "brown_dwarf", "rocky"}
    hydrogen_fraction : float
        Hydrogen mass fraction X_p (gas giants and brown dwarfs).
    a_li : float
        A(Li) of the planet's gas (gas giants and brown dwarfs); 3.26 is meteoritic
        (Asplund et al. 2009, ARA&A 47, 481).
    li_mass_fraction : float
        Li mass fraction w_Li of rocky bodies (CI chondrites ~1.5e-6; Lodders 2003).
    """

    kind: str = "gas_giant"
    hydrogen_fraction: float = 0.70
    a_li: float = 3.26
    li_mass_fraction: float = 1.5e-6

    @property
    def h_atoms_per_msun(self) -> float:
        """N_H per solar mass of planet, in units of 1/u."""
        return self.hydrogen_fraction / AMU_H if self.kind in GAS_KINDS else 0.0

    @property
    def li_atoms_per_msun(self) -> float:
        """N_Li per solar mass of planet, in units of 1/u."""
        if self.kind in GAS_KINDS:
            return self.h_atoms_per_msun * 10.0 ** (self.a_li - 12.0)
        return self.li_mass_fraction / AMU_LI


def enriched_abundance(a_star, m_cz_msun, m_planet_msun, composition: PlanetComposition,
                       x_star=0.70, li_survival=1.0):
    """A(Li) of the envelope after the planet is fully mixed into it.

    Parameters
    ----------
    a_star : array_like
        A(Li) of the envelope before engulfment.
    m_cz_msun : array_like
        Mass of the convective envelope the planet mixes into (M_sun).
    m_planet_msun : array_like
        Mass of planet material that reaches the envelope (M_sun).
    composition : PlanetComposition
    x_star : array_like
        Hydrogen mass fraction of the stellar envelope.
    li_survival : array_like
        Fraction of the planet's lithium atoms not yet burnt (1 right after mixing).

    Returns
    -------
    ndarray
        A_new; NaN where M_cz is not positive.

    References
    ----------
    Atom counting from the definition of A(X); check table in tests/test_enrichment.py.
    """
    m_cz = np.asarray(m_cz_msun, dtype=float)
    n_h_star = np.asarray(x_star, dtype=float) * m_cz / AMU_H
    n_li_star = n_h_star * 10.0 ** (np.asarray(a_star, dtype=float) - 12.0)
    m_p = np.asarray(m_planet_msun, dtype=float)
    n_h = n_h_star + composition.h_atoms_per_msun * m_p
    n_li = n_li_star + composition.li_atoms_per_msun * m_p * np.asarray(li_survival, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(m_cz > 0, 12.0 + np.log10(n_li / n_h), np.nan)


def planet_mass_for_abundance(a_star, a_target, m_cz_msun, composition: PlanetComposition,
                              x_star=0.70):
    """Planet mass (M_sun) whose full mixing raises A(Li) from ``a_star`` to ``a_target``.

    Solving the atom-counting formula for M_p (it is linear before the logarithm):

        r = 10^(A_target - 12),  n_H* = X_* M_cz / m_H
        M_p = n_H* (r - 10^(A_* - 12)) / (nLi_p - r nH_p)

    where nLi_p, nH_p are the planet's atoms per unit mass.  Returns +inf where the
    target cannot be reached by any mass of this planet (its own abundance is at or
    below the target), 0 where the target is not above the current abundance.
    """
    r = 10.0 ** (np.asarray(a_target, dtype=float) - 12.0)
    n_h_star = np.asarray(x_star, dtype=float) * np.asarray(m_cz_msun, dtype=float) / AMU_H
    gain = n_h_star * (r - 10.0 ** (np.asarray(a_star, dtype=float) - 12.0))
    per_mass = composition.li_atoms_per_msun - r * composition.h_atoms_per_msun
    with np.errstate(divide="ignore", invalid="ignore"):
        mass = np.where(per_mass > 0, gain / per_mass, np.inf)
    return np.where(gain <= 0, 0.0, mass)


def mjup_to_msun(m_mjup):
    """Jupiter masses to solar masses (IAU 2015 nominal values)."""
    return np.asarray(m_mjup, dtype=float) * M_JUP_MSUN
