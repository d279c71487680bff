"""Published constants and the solver's default numerical settings, in one documented place.

Units are SI: m, kPa, kN/m3; angles in radians inside the solver, degrees at the interface.
"""

#: Unit weight of water [kN/m3]. Fresh water at about 4-20 degC, rho_w * g = 1000 * 9.81 / 1000;
#: the value used throughout soil-mechanics texts (e.g. Duncan, Wright and Brandon 2014, ch. 6).
GAMMA_W = 9.81

#: Default tolerance on the factor of safety between successive iterations [-].
FOS_TOLERANCE = 1e-4

#: Default iteration limit of the iterative methods.
MAX_ITERATIONS = 100

#: Smallest admissible m_alpha = cos(alpha) * (1 + tan(alpha) tan(phi') / F) at any slice of
#: Bishop's simplified method. Below it the normal force is unreliable. Common practice, after
#: Whitman and Bailey (1967), as restated by Duncan, Wright and Brandon (2014), ch. 6.
M_ALPHA_MIN = 0.2
