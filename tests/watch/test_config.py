"""The site-file loader: the example loads; each fault names the file and the key."""

import tomllib

import pytest

from watch.config import load_site_config, parse_site_config
from watch.errors import ConfigError
from watch.workspace import EXAMPLE_SITE_TOML


def _example() -> dict:
    return tomllib.loads(EXAMPLE_SITE_TOML)


def test_example_site_loads():
    config = parse_site_config(_example())
    assert config.id == "fernhollow"
    assert [p.id for p in config.piezometers] == ["PZ-1", "PZ-2"]
    assert config.piezometers[1].calibration.gauge_factor == pytest.approx(-0.0712, rel=1e-12)
    assert config.rain_gauges[0].bucket_mm == pytest.approx(0.2, rel=1e-12)
    assert config.feed_for("fh_2026.csv").name == "cutting-logger"
    assert config.feed_for("other.csv") is None


def test_missing_file_says_how_to_make_one(tmp_path):
    with pytest.raises(ConfigError, match="not found; create one with `slipwatch init`"):
        load_site_config(tmp_path / "site.toml")


def test_invalid_toml_names_the_file(tmp_path):
    path = tmp_path / "site.toml"
    path.write_text("[site\nid = 1")
    with pytest.raises(ConfigError, match="site.toml: not valid TOML"):
        load_site_config(path)


def test_unknown_key_is_an_error_naming_it():
    data = _example()
    data["piezometer"][0]["valid_rnage"] = [0, 1]
    with pytest.raises(ConfigError, match=r"\[\[piezometer\]\] 'PZ-1' key 'valid_rnage' is unknown"):
        parse_site_config(data)


def test_bad_values_name_the_key():
    cases = [
        (("piezometer", 0, "reading"), "pressure", r"key 'reading' must be one of"),
        (("piezometer", 0, "tip_elevation"), 60.0, r"key 'tip_elevation' 60.0 is above collar"),
        (("piezometer", 0, "valid_range"), [5.0, 1.0], r"key 'valid_range' must be \[low, high\]"),
        (("piezometer", 0, "section"), "XX", r"key 'section' 'XX' is not a \[\[section\]\] id"),
        (("feed", 0, "time_zone"), "Mars/Olympus", r"time_zone 'Mars/Olympus' is not an IANA time zone"),
        (("feed", 0, "decimal"), ";", r"key 'decimal' must be '.' or ','"),
        (("rain_gauge", 0, "bucket_mm"), 0.0, r"key 'bucket_mm' must be > 0"),
    ]
    for (table, index, key), value, message in cases:
        data = _example()
        data[table][index][key] = value
        with pytest.raises(ConfigError, match=message):
            parse_site_config(data)


def test_feed_mapping_to_unknown_instrument():
    data = _example()
    data["feed"][0]["columns"]["PZ9"] = "PZ-9"
    with pytest.raises(ConfigError, match=r"key 'columns' entry 'PZ9' = 'PZ-9': 'PZ-9' is not a piezometer"):
        parse_site_config(data)


def test_vibrating_wire_needs_its_temperature_column():
    data = _example()
    del data["feed"][0]["temperature_columns"]
    with pytest.raises(ConfigError, match=r"has no column for vibrating-wire piezometer 'PZ-2'"):
        parse_site_config(data)


def test_duplicate_instrument_ids():
    data = _example()
    data["rain_gauge"][0]["id"] = "PZ-1"
    data["section"][0]["gauge"] = "PZ-1"
    with pytest.raises(ConfigError, match=r"'PZ-1' key 'id' is also the id of a piezometer"):
        parse_site_config(data)


def test_long_feed_needs_instrument_and_value_columns():
    data = _example()
    feed = data["feed"][0]
    feed["layout"] = "long"
    del feed["columns"], feed["temperature_columns"]
    with pytest.raises(ConfigError, match=r"key 'instrument_column' is required for layout = 'long'"):
        parse_site_config(data)


def test_oldest_reading_as_toml_date():
    data = _example()
    data["ingest"]["oldest_reading"] = tomllib.loads("d = 2010-05-01")["d"]
    assert parse_site_config(data).ingest.oldest_reading.year == 2010


def test_the_example_of_docs_formats_loads():
    # docs/formats.md section 2 is the contract between the parts of slipwatch.
    from pathlib import Path

    text = (Path(__file__).resolve().parents[2] / "docs" / "formats.md").read_text()
    block = text.split("## 2. Site file")[1].split("```toml\n")[1].split("```")[0]
    config = parse_site_config(tomllib.loads(block))
    assert config.piezometers[0].calibration.zero_reading == 8750.0
    assert config.feeds[0].columns == {"P1 (kPa)": "P1", "Rain N (mm)": "RG-N"}


def test_sections_and_piezometers_are_looked_up_by_id():
    config = parse_site_config(_example())
    first = config.sections[0]
    assert config.section(first.id) is first and config.section_ref(first.id) is first
    assert config.section_ref("XX-1") is None
    for ref in config.sections:
        # The index keeps the file's order and agrees with a scan of the list.
        assert list(config.piezometers_of(ref.id)) == [p for p in config.piezometers if p.section == ref.id]
    assert config.piezometers_of("XX-1") == ()
    known = ", ".join(s.id for s in config.sections)
    with pytest.raises(ConfigError, match=rf"section 'XX-1' is not listed in site.toml \(known: {known}\)"):
        config.section("XX-1")


@pytest.mark.parametrize(
    "mutate, match",
    [
        # A misspelt rule table used to be ignored: that trigger rule disappeared.
        (lambda d: d.update(triger=[{"name": "fos-red"}]),
         r"top level table 'triger' is unknown \(did you mean 'trigger'\?"),
        (lambda d: d["piezometer"][0].update(valid_rnage=[0, 1]),
         r"'valid_rnage' is unknown \(did you mean 'valid_range'\?"),
        (lambda d: d["ingest"].update(stale_hour=6), r"'stale_hour' is unknown \(did you mean 'stale_hours'\?"),
        (lambda d: d.update(wibble={}), r"table 'wibble' is unknown \(valid tables: cycle, daemon"),
    ],
)
def test_unknown_tables_and_keys_are_errors_with_a_hint(mutate, match):
    data = _example()
    mutate(data)
    with pytest.raises(ConfigError, match=match):
        parse_site_config(data)


def test_unknown_keys_in_tables_read_elsewhere_stop_the_site_from_loading(tmp_path):
    from watch.workspace import init_workspace

    workspace = init_workspace(tmp_path / "ws")
    for table, match in (("[data_alerts]\nstale_hour = 6\n", r"'stale_hour' is unknown \(did you mean 'stale_hours'"),
                         ("[daemon]\nintervall_minutes = 5\n", r"did you mean 'interval_minutes'"),
                         ("[notify]\nlog_fil = 'x.log'\n", r"did you mean 'log_file'")):  # fmt: skip
        workspace.site_file.write_text(EXAMPLE_SITE_TOML + table, encoding="utf-8")
        with pytest.raises(ConfigError, match=match):
            workspace.config()


@pytest.mark.parametrize(
    "time_format, match",
    [
        ("%Y-%m-%d %H:%Q", r"time_format' '%Y-%m-%d %H:%Q' is not a valid time format \('Q' is a bad directive"),
        ("%Y-%m-%d %H:%M %", r"is not a valid time format \(stray %"),
        ("%H:%M", r"does not give the full date \(year, month and day\)"),
        ("%d/%m %H:%M", r"does not give the full date"),
    ],
)
def test_time_format_is_checked_when_the_site_is_loaded(time_format, match):
    data = _example()
    data["feed"][0]["time_format"] = time_format
    with pytest.raises(ConfigError, match=match):
        parse_site_config(data)


@pytest.mark.parametrize("time_format", ["%Y-%m-%d %H:%M", "%d/%m/%Y %H:%M:%S", "%Y-%m-%dT%H:%M:%S%z", "%Y-%j %H:%M"])
def test_valid_time_formats_load(time_format):
    data = _example()
    data["feed"][0]["time_format"] = time_format
    assert parse_site_config(data).feeds[0].time_format == time_format


def test_long_feed_names_the_instruments_it_delivers():
    data = _example()
    feed = data["feed"][0]
    feed.update(layout="long", instrument_column="Sensor", value_column="Value")
    del feed["columns"], feed["temperature_columns"]
    with pytest.raises(ConfigError, match=r"key 'instruments' is required for layout = 'long'"):
        parse_site_config(data)
    feed["instruments"] = ["PZ-1", "PZ-7"]
    with pytest.raises(ConfigError, match=r"key 'instruments' 'PZ-7' is not a piezometer or rain gauge id"):
        parse_site_config(data)
    feed["instruments"] = ["PZ-1", "RG-1"]
    assert parse_site_config(data).feeds[0].delivers == {"PZ-1", "RG-1"}


def test_a_bad_template_leaves_no_half_made_workspace(tmp_path):
    from watch.workspace import init_workspace

    template = tmp_path / "template.toml"
    template.write_text(EXAMPLE_SITE_TOML + "[[triger]]\nname = 'fos-red'\n[cycle]\nchatter_windw_hours = 24\n")
    with pytest.raises(ConfigError, match=r"table 'triger' is unknown \(did you mean 'trigger'\?"):
        init_workspace(tmp_path / "ws", template)
    template.write_text(EXAMPLE_SITE_TOML + "[cycle]\nchatter_windw_hours = 24\n")
    with pytest.raises(ConfigError, match=r"'chatter_windw_hours' is unknown \(did you mean 'chatter_window_hours'\?"):
        init_workspace(tmp_path / "ws", template)
    assert not (tmp_path / "ws").exists()
