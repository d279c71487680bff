"""Named exceptions of the service. Messages say what is wrong and what the user can do."""


class UserError(Exception):
    """Base class of errors caused by input the user can fix (files, configuration, options).
    The CLI prints the message as one line and exits non-zero."""


class ConfigError(UserError):
    """The site or section configuration is missing or invalid; the message names the file
    and the key."""


class WorkspaceError(UserError):
    """The workspace folder is missing, incomplete or locked by another process."""


class StoreError(UserError):
    """The SQLite store cannot be opened, migrated or written."""


class FeedError(UserError):
    """A feed file cannot be read at all (as opposed to single bad rows, which are rejected
    and reported without stopping the ingest)."""
