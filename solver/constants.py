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

#: The line of thrust of Spencer and Morgenstern-Price is checked (inside the sliding mass) only
#: at slice boundaries where |E| is at least this fraction of the largest |E| on the surface:
#: where E is nearly zero (near the ends) its point of action is meaningless. Common practice.
THRUST_LINE_MIN_FORCE_RATIO = 0.05

# --- Critical-surface search (solver/search.py). Numerical settings, not published values. ---

#: Slices per trial surface of a search.
SEARCH_SLICES = 30

#: Smallest vertical depth [m] of a slide that may win a search; shallower skin slips do not.
#: A project default, not a published value (set 0 to let every surface compete).
SEARCH_MIN_DEPTH = 1.0

#: Distinct best surfaces kept by a search on each face and re-evaluated warm, and how far apart
#: [m] (in scarp or toe offset) two kept surfaces of a face must be.
SEARCH_KEEP = 10
SEARCH_MIN_SEPARATION = 0.5

#: A section has a face towards +x (or -x) where its ground falls in that direction by at least
#: this fraction of its whole relief (highest minus lowest ground point); every such face is
#: searched. Smaller falls (a kerb, a ditch lip, a gentle rise of the floodplain) are not slope
#: faces. A project setting, not a published value; [search] face names a face explicitly.
SEARCH_FACE_MIN_HEIGHT_FRACTION = 0.1

#: Trial surfaces sliced and solved together (bounds the memory of big searches).
SEARCH_BATCH_SIZE = 4096

#: Smallest step [m] of the pattern-search refinement of a circle, and its iteration limit.
SEARCH_REFINE_STEP_TOLERANCE = 0.01
SEARCH_REFINE_MAX_STEPS = 200

#: Vertices of the polyline of the non-circular optimisation, its limit of evaluations, and
#: its kinematic limits [deg]: steepest segment, largest change of inclination at a vertex.
SEARCH_POLYLINE_VERTICES = 12
SEARCH_POLYLINE_MAX_EVALUATIONS = 3000
SEARCH_MAX_INCLINATION_DEG = 80.0
SEARCH_MAX_ANGLE_CHANGE_DEG = 30.0

#: Relative change of the critical factor of safety [-] beyond which a warm re-evaluation
#: advises a full search.
SEARCH_FULL_SEARCH_TOLERANCE = 0.05
