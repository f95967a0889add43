"""Rosseland mean opacity for envelope integrations (thin wrapper around ``rm-tables``).

OPAL (Iglesias & Rogers 1996) above ~5,600 K joined to the Ferguson et al. (2005)
molecular and dust tables below, both at Grevesse & Sauval (1998) metal ratios,
interpolated in X and Z by the ``rm-tables`` package.  That package belongs to the
optional ``grid`` extra: it is needed only to BUILD the track grid and is imported
inside :func:`opacity_function`, never when ``prioritize`` is imported.

References
----------
Iglesias & Rogers 1996, ApJ 464, 943 (OPAL opacities).
Ferguson, Alexander, Allard et al. 2005, ApJ 623, 585 (low-temperature opacities).
Grevesse & Sauval 1998, Space Sci. Rev. 85, 161 (metal mixture).
"""

from __future__ import annotations

from collections.abc import Callable
from functools import lru_cache

import numpy as np

from ..errors import ModelRangeError

COLD_SOURCE = "ferguson"     # Ferguson et al. 2005 below the OPAL handover
OPAL_SET = "GS98hz"          # OPAL Type-1 tables at Grevesse & Sauval 1998 ratios


@lru_cache(maxsize=32)
def opacity_function(x: float, z: float) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    """Rosseland mean opacity at one composition, as ``kappa(t_k, rho_gcc)``.

    Parameters
    ----------
    x, z : float
        Hydrogen and metal mass fractions (helium is the rest).  OPAL covers
        0 <= Z <= 0.1 and the tabulated X range at each Z.

    Returns
    -------
    callable
        ``kappa(t_k, rho_gcc) -> ndarray`` in cm^2 g^-1, vectorised.  Valid for
        501 K <= T <= 5e8 K; in density the tables' nearest value is held outside
        10^-8 <= rho/T_6^3 <= 10 g cm^-3.

    Raises
    ------
    ImportError
        If ``rm-tables`` is not installed (install the ``grid`` extra).
    ModelRangeError
        If the composition lies outside the tables.

    References
    ----------
    Iglesias & Rogers 1996, ApJ 464, 943; Ferguson et al. 2005, ApJ 623, 585.
    """
    try:
        import rm_tables
    except ImportError as exc:
        raise ImportError(
            "the envelope integration needs the opacity tables of the 'rm-tables' package; "
            "install the grid-building extra: pip install 'prioritize[grid]'") from exc
    try:
        table = rm_tables.opacity(X=float(x), Z=float(z), cold=COLD_SOURCE, opal_set=OPAL_SET)
    except ValueError as exc:
        raise ModelRangeError(f"no opacity table for X={x}, Z={z}: {exc}") from exc

    def kappa(t_k, rho_gcc):
        return np.asarray(table(t_k, rho_gcc), dtype=float)

    return kappa


def rosseland_mean_opacity(t_k, rho_gcc, x: float, z: float) -> np.ndarray:
    """Rosseland mean opacity kappa(T, rho) in cm^2 g^-1 (OPAL + Ferguson 2005).

    Parameters
    ----------
    t_k : array_like
        Temperature, K (501 K to 5e8 K).
    rho_gcc : array_like
        Density, g cm^-3 (finite, positive).
    x, z : float
        Hydrogen and metal mass fractions.

    Returns
    -------
    ndarray
        Opacity, cm^2 g^-1, of the broadcast shape.

    Raises
    ------
    ModelRangeError
        For a temperature or density the tables cannot answer.

    References
    ----------
    Iglesias & Rogers 1996, ApJ 464, 943; Ferguson et al. 2005, ApJ 623, 585.
    """
    kappa = opacity_function(float(x), float(z))
    try:
        return kappa(t_k, rho_gcc)
    except ValueError as exc:
        raise ModelRangeError(f"opacity requested outside the tables: {exc}") from exc
