"""Reading our TOML files (site, section, slip case) with one set of clear errors."""

from __future__ import annotations

import tomllib
from pathlib import Path

from watch.errors import ConfigError

__all__ = ["read_toml"]


def read_toml(path: Path | str, kind: str, missing_hint: str = "") -> tuple[dict, bytes]:
    """The parsed TOML of ``path`` and its raw bytes (for checksums).

    Raises ConfigError naming the file and the problem: missing, a folder, unreadable, not
    UTF-8, or TOML syntax (with line and column). ``kind`` names the file for people ("section
    file"); ``missing_hint`` is added when the file does not exist.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
        return tomllib.loads(raw.decode("utf-8")), raw
    except FileNotFoundError:
        raise ConfigError(f"{path}: {kind} not found{missing_hint}") from None
    except IsADirectoryError:
        raise ConfigError(f"{path}: is a folder, not a {kind}") from None
    except PermissionError:
        raise ConfigError(f"{path}: cannot read the {kind} (permission denied)") from None
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: not a UTF-8 text file; save it as UTF-8") from None
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(f"{path}: not valid TOML: {error}") from None
