"""Reading section files (docs/formats.md, section 1) into ``solver.section.Section``."""

from __future__ import annotations

import tomllib
from pathlib import Path

from solver.errors import SectionError
from solver.section import Section, section_from_dict
from watch.errors import ConfigError


def load_section(path: str | Path) -> Section:
    """Read and validate the section file at ``path``.

    Raises ConfigError naming the file and the problem: missing or unreadable file, TOML syntax
    errors (with line and column), and every validation error of the section itself.
    """
    path = Path(path)
    try:
        with path.open("rb") as handle:
            data = tomllib.load(handle)
    except FileNotFoundError:
        raise ConfigError(f"{path}: section file not found") from None
    except IsADirectoryError:
        raise ConfigError(f"{path}: is a folder, not a section file") from None
    except PermissionError:
        raise ConfigError(f"{path}: cannot read the section file (permission denied)") from None
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(f"{path}: not valid TOML: {error}") from None
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: not a UTF-8 text file; save it as UTF-8") from None
    try:
        return section_from_dict(data)
    except SectionError as error:
        raise ConfigError(f"{path}: {error}") from None
