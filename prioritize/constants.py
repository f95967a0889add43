"""Physical and solar constants, one source of truth, each with its citation.

cgs units unless the name says otherwise.
"""

from __future__ import annotations

import astropy.constants as _c
import astropy.units as _u

G_CGS = _c.G.cgs.value                      # CODATA 2018 via astropy
K_B_CGS = _c.k_B.cgs.value
M_H_CGS = 1.00794 * _u.u.to(_u.g)           # mean mass of a hydrogen atom
SIGMA_SB_CGS = _c.sigma_sb.cgs.value

M_SUN_G = _c.M_sun.cgs.value                # IAU 2015 nominal (GM_sun / G)
R_SUN_CM = _c.R_sun.cgs.value               # IAU 2015 nominal 6.957e10 cm
L_SUN_ERG_S = _c.L_sun.cgs.value            # IAU 2015 nominal 3.828e33 erg/s
TEFF_SUN_K = 5772.0                          # IAU 2015 Resolution B3
MBOL_SUN = 4.74                              # IAU 2015 Resolution B2
LOGG_SUN = 4.438                             # log10(G M_sun / R_sun^2), IAU 2015 nominal values

M_JUP_MSUN = 9.546e-4                        # IAU 2015 nominal Jupiter mass / M_sun
M_EARTH_MSUN = 3.004e-6                      # IAU 2015 nominal Earth mass / M_sun
R_JUP_CM = 6.9911e9                          # Jupiter mean radius, 69,911 km
R_EARTH_CM = 6.371e8                         # Earth mean radius, 6,371.0 km (IUGG; from memory)

AMU_H = 1.008                                # atomic mass of H (u), IUPAC standard
AMU_LI = 6.94                                # atomic mass of Li (u), IUPAC standard

A_LI_METEORITIC = 3.26                       # CI chondrites, Asplund et al. 2009, ARA&A 47, 481
A_LI_SUN = 1.05                              # solar photosphere, Asplund et al. 2009
X_SUN_PRESENT = 0.7381                       # Asplund et al. 2009, Table 4
Z_PROTOSOLAR = 0.0142                        # protosolar metal mass fraction, Asplund et al. 2009
Z_SUN_TRACKS = 0.02                          # metallicity scale of the Hurley, Pols & Tout (2000) fits
SECONDS_PER_YEAR = 3.15576e7                 # Julian year
C_LIGHT_CGS = _c.c.cgs.value                 # exact (SI definition) via astropy
H_PLANCK_CGS = _c.h.cgs.value                # exact (SI definition) via astropy
M_ELECTRON_CGS = _c.m_e.cgs.value            # CODATA 2018 via astropy
AMU_CGS = _u.u.to(_u.g)                      # atomic mass unit, m(12C)/12, CODATA 2018
AVOGADRO = _c.N_A.value                      # mol^-1, exact (SI definition) via astropy
E_CHARGE_ESU = _c.e.gauss.value              # elementary charge (statcoulomb), exact via astropy
EV_ERG = _u.eV.to(_u.erg)                    # exact (SI definition)
A_RAD_CGS = 4.0 * SIGMA_SB_CGS / C_LIGHT_CGS  # radiation density constant a = 4 sigma / c
