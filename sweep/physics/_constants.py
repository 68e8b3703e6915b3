"""Physical constants and unit conversions as plain float64 module-level numbers.

Values come from :mod:`astropy.constants` (CODATA 2018 and IAU 2015 nominal values, astropy's
defaults) and are converted to SI floats once, at import, so the hot kernels never touch
:mod:`astropy.units`.

References
----------
.. [1] Prsa, A. et al. 2016, "Nominal values for selected solar and planetary quantities: IAU 2015
   Resolution B3", AJ 152, 41. doi:10.3847/0004-6256/152/2/41
.. [2] Tiesinga, E. et al. 2021, "CODATA recommended values of the fundamental physical
   constants: 2018", Rev. Mod. Phys. 93, 025010. doi:10.1103/RevModPhys.93.025010
"""

from __future__ import annotations

import math

import astropy.constants as _c
import astropy.units as _u

#: Astronomical unit [m].
AU_M = float(_c.au.to_value(_u.m))
#: Parsec [m].
PC_M = float(_c.pc.to_value(_u.m))
#: Nominal solar radius, IAU 2015 [m].
R_SUN_M = float(_c.R_sun.to_value(_u.m))
#: Nominal equatorial Earth radius, IAU 2015 [m].
R_EARTH_M = float(_c.R_earth.to_value(_u.m))
#: Nominal equatorial Jupiter radius, IAU 2015 [m].
R_JUP_M = float(_c.R_jup.to_value(_u.m))
#: Solar mass [kg].
M_SUN_KG = float(_c.M_sun.to_value(_u.kg))
#: Earth mass [kg].
M_EARTH_KG = float(_c.M_earth.to_value(_u.kg))
#: Jupiter mass [kg].
M_JUP_KG = float(_c.M_jup.to_value(_u.kg))
#: Nominal solar luminosity, IAU 2015 [W].
L_SUN_W = float(_c.L_sun.to_value(_u.W))
#: Newtonian constant of gravitation [m^3 kg^-1 s^-2].
G_SI = float(_c.G.to_value(_u.m**3 / (_u.kg * _u.s**2)))
#: Stefan-Boltzmann constant [W m^-2 K^-4].
SIGMA_SB = float(_c.sigma_sb.to_value(_u.W / (_u.m**2 * _u.K**4)))
#: Planck constant [J s].
H_PLANCK = float(_c.h.to_value(_u.J * _u.s))
#: Speed of light in vacuum [m s^-1].
C_LIGHT = float(_c.c.to_value(_u.m / _u.s))
#: Boltzmann constant [J K^-1].
K_B = float(_c.k_B.to_value(_u.J / _u.K))
#: Day [s].
DAY_S = float((1.0 * _u.day).to_value(_u.s))
#: Julian year [s].
YEAR_S = float((1.0 * _u.yr).to_value(_u.s))
#: Jansky [W m^-2 Hz^-1].
JY_SI = float((1.0 * _u.Jy).to_value(_u.W / (_u.m**2 * _u.Hz)))
#: Micro-jansky [W m^-2 Hz^-1].
UJY_SI = JY_SI * 1e-6
#: Nominal solar effective temperature from the IAU 2015 nominal L and R by Stefan-Boltzmann [K]
#: (5772 K, IAU 2015 Resolution B3).
T_SUN_K = (L_SUN_W / (4.0 * math.pi * R_SUN_M**2 * SIGMA_SB)) ** 0.25
