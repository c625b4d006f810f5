"""Physical constants and unit factors used by dustrt, each with its source.

Values that come from scipy.constants (CODATA) are used from there directly
(e.g. h and c in :mod:`dustrt.instrument`); this module holds the rest.
"""

#: Mean radius of the Moon [km] (IAU Working Group on Cartographic Coordinates and
#: Rotational Elements; CHECK_VALUES.md). Exact by adoption.
MOON_RADIUS_KM = 1737.4

#: Nominal solar radius [km] (IAU 2015 Resolution B3). Exact by adoption.
SOLAR_RADIUS_KM = 695700.0

#: Astronomical unit [km] (IAU 2012 Resolution B2). Exact by definition.
AU_KM = 149597870.7

#: Unit factors (exact).
KM_TO_CM = 1.0e5
UM2_TO_CM2 = 1.0e-8
