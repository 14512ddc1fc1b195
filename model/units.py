"""SI conversions for the API's field units (mm, cm^-3, GeV/c, pC, GHz, mrad, %/m).

Only SI prefixes and CODATA constants from scipy.constants; no hand-typed physics.
"""

from __future__ import annotations

from scipy import constants as _c

MM = 1e-3  # m per mm
PER_CM3 = 1e6  # m^-3 per cm^-3
GEV_PER_C = 1e9 * _c.e / _c.c  # kg m/s per GeV/c
PC = 1e-12  # C per pC
GHZ = 1e9  # Hz per GHz
MRAD = 1e-3  # rad per mrad
MM_MRAD = 1e-6  # m rad per mm mrad
NM = 1e-9  # m per nm
MV_PER_M = 1e6  # V/m per MV/m
GV_PER_M = 1e9  # V/m per GV/m
PCT = 1e-2  # fraction per percent
