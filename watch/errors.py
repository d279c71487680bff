"""Named exceptions of the service. Messages say what is wrong and what the user can do."""


class UserError(Exception):
    """Base class of errors caused by input the user can fix (files, configuration, options).
    The CLI prints the message as one line and exits non-zero."""


class ConfigError(UserError):
    """The site or section configuration is missing or invalid; the message names the file
    and the key."""


class WorkspaceError(UserError):
    """The workspace folder is missing, incomplete or locked by another process."""


class BusyError(WorkspaceError):
    """Another process holds a lock of the workspace (an ingest running); trying again later
    is the remedy."""


class StoreError(UserError):
    """The SQLite store cannot be opened, migrated or written."""


class FeedError(UserError):
    """A feed file cannot be read at all (as opposed to single bad rows, which are rejected
    and reported without stopping the ingest)."""


class ModelError(UserError):
    """A groundwater, rainfall or rainfall-response model cannot give a trustworthy answer for
    the data given (no usable head, a duration outside a threshold's range, too few readings to
    calibrate, a poor fit); the message says why and what would make it usable."""


class CalibrationRefused(UserError):
    """A calibration failed its checks (the back-analysis' own consistency, or a calibrated
    section's record with the new strength); the message lists them and how to override."""
