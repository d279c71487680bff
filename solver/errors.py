"""Named exceptions of the solver. Each message names the offending item and value."""


class SolverError(Exception):
    """Base class of every error the solver raises on purpose."""


class SectionError(SolverError, ValueError):
    """The section (ground, strata, materials, water lines, loads) is not valid."""


class SurfaceError(SolverError, ValueError):
    """A slip surface is not admissible for the section (does not cut the ground twice, leaves
    the section, crosses the impenetrable base, doubles back)."""


class MethodError(SolverError, ValueError):
    """Unknown method name or invalid numerical settings (tolerance, iteration limit)."""


class SearchError(SolverError):
    """A critical-surface search found no valid surface; the message says how many trial
    surfaces were rejected and why."""
