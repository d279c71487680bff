"""Loading section files from disk (watch.sections): errors name the file and the problem."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from watch.errors import ConfigError
from watch.sections import load_section

FORMATS = Path(__file__).resolve().parents[2] / "docs" / "formats.md"


def _documented_example() -> str:
    text = FORMATS.read_text(encoding="utf-8")
    part = text[text.index("## 1. Section file"):text.index("## 2.")]
    return re.search(r"```toml\n(.*?)```", part, re.S).group(1)


def test_documented_section_file_loads(tmp_path):
    path = tmp_path / "wc_040.toml"
    path.write_text(_documented_example(), encoding="utf-8")
    section = load_section(path)
    assert section.id == "WC-040"
    assert section.ground.shape == (4, 2)


def test_missing_file_is_named(tmp_path):
    path = tmp_path / "nowhere.toml"
    with pytest.raises(ConfigError, match=r"nowhere\.toml: section file not found"):
        load_section(path)


def test_toml_syntax_error_is_named_with_its_line(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text('[section]\nid = "X\n', encoding="utf-8")
    with pytest.raises(ConfigError, match=r"broken\.toml: not valid TOML: .*line 2"):
        load_section(path)


def test_section_error_gets_the_file_name(tmp_path):
    text = _documented_example().replace("friction_angle = 30.0", "friction_angle = 95.0")
    path = tmp_path / "steep.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError,
                       match=r"steep\.toml: material 'Till': friction_angle = 95.0 deg"):
        load_section(path)


def test_non_utf8_file_is_refused(tmp_path):
    path = tmp_path / "latin.toml"
    path.write_bytes('[section]\nid = "Caf\xe9"\n'.encode("latin-1"))
    with pytest.raises(ConfigError, match=r"latin\.toml: not a UTF-8 text file"):
        load_section(path)
