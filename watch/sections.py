"""Reading section files (docs/formats.md, section 1) into ``solver.section.Section``."""

from __future__ import annotations

import hashlib
from pathlib import Path

from solver.errors import SectionError
from solver.section import Section, section_from_dict
from watch.errors import ConfigError
from watch.tomlfiles import read_toml


def load_section(path: str | Path) -> Section:
    """Read and validate the section file at ``path``.

    Raises ConfigError naming the file and the problem: missing or unreadable file, TOML syntax
    errors (with line and column), and every validation error of the section itself.
    """
    return read_section_file(path)[0]


def read_section_file(path: str | Path) -> tuple[Section, str]:
    """The section of the file at ``path`` and the SHA-256 digest of the file's bytes (what
    a parameter version records, so that an edited file is noticed). Errors as
    :func:`load_section`."""
    path = Path(path)
    data, raw = read_toml(path, "section file")
    try:
        return section_from_dict(data), hashlib.sha256(raw).hexdigest()
    except SectionError as error:
        raise ConfigError(f"{path}: {error}") from None
