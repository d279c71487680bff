"""Trigger levels and rules from the site file: defaults, section overrides, data rules, and
errors that name the key. Values are examples (common practice, no source)."""

import tomllib
from datetime import timedelta
from pathlib import Path

import pytest

from watch.alerts import Direction
from watch.config import parse_site_config
from watch.errors import ConfigError
from watch.triggers import alert_settings

DEMO_SITE = Path(__file__).resolve().parents[2] / "config" / "site.toml"


def _demo() -> dict:
    return tomllib.loads(DEMO_SITE.read_text(encoding="utf-8"))


def _settings(data: dict):
    config = parse_site_config(data)
    return config, alert_settings(config)


def test_demo_levels_and_section_override():
    config, settings = _settings(_demo())
    assert [lv.name for lv in sorted(settings.levels.values(), key=lambda lv: lv.rank)] == [
        "watch", "amber", "red"]
    assert settings.levels["red"].inspection_due_hours == pytest.approx(6.0, rel=1e-12)
    assert settings.levels["watch"].inspection_due_hours is None
    rules = {r.rule.name: r for r in settings.rules_for(config, "WC-060")}
    # WC-060 has its owner's own FoS levels; the rain rules are the site's.
    assert rules["fos-amber"].rule.trigger == pytest.approx(1.12, rel=1e-12)
    assert rules["fos-red"].rule.clear == pytest.approx(1.12, rel=1e-12)
    assert rules["fos-red"].rule.direction is Direction.BELOW
    assert rules["rain-24h"].instrument == "RG-WC"
    assert rules["rain-24h"].rule.direction is Direction.ABOVE
    site = {r.rule.name: r for r in settings.rules_for(config, "WC-040")}
    assert site["fos-amber"].rule.trigger == pytest.approx(1.25, rel=1e-12)


def test_instrument_rules_apply_to_their_own_section_only():
    config, settings = _settings(_demo())
    assert "head-FE210-PA" in {r.rule.name for r in settings.rules_for(config, "FE-210")}
    assert "head-FE210-PA" not in {r.rule.name for r in settings.rules_for(config, "WC-040")}


def test_every_section_gets_data_quality_rules():
    config, settings = _settings(_demo())
    names = {r.rule.name for r in settings.rules_for(config, "WC-040")}
    assert {"data-stale", "data-assessment", "data-flat-WC040-PA", "data-suspect-WC040-PB"} <= names
    stale = next(r for r in settings.rules_for(config, "WC-040") if r.rule.name == "data-stale")
    assert stale.kind == "data"
    assert stale.rule.trigger == pytest.approx(6.0, rel=1e-12)


def test_a_section_may_switch_a_site_rule_off():
    data = _demo()
    data["trigger"].append({"section": "WC-080", "name": "rain-24h", "enabled": False})
    config, settings = _settings(data)
    assert "rain-24h" not in {r.rule.name for r in settings.rules_for(config, "WC-080")}
    assert "rain-24h" in {r.rule.name for r in settings.rules_for(config, "WC-040")}


def test_delays_are_read_in_hours():
    data = _demo()
    data["trigger"][0]["on_delay_hours"] = 2.5
    config, settings = _settings(data)
    rule = next(r for r in settings.rules_for(config, "WC-040") if r.rule.name == "fos-amber").rule
    assert rule.on_delay == timedelta(hours=2.5)


def test_rain_event_rules_carry_their_dry_gap():
    # The demo's rain-caine rule sets 12 h; a rule without the key takes the default 48 h
    # (Brunetti et al. 2010, from memory: watch.rainfall.DEFAULT_DRY_GAP_H).
    config, settings = _settings(_demo())
    rules = {r.rule.name: r for r in settings.rules_for(config, "WC-040")}
    assert rules["rain-caine"].dry_gap_hours == 12.0
    assert "ended by 12 h dry" in rules["rain-caine"].description
    data = _demo()
    next(t for t in data["trigger"] if t["name"] == "rain-caine").pop("dry_gap_hours")
    config, settings = _settings(data)
    rules = {r.rule.name: r for r in settings.rules_for(config, "WC-040")}
    assert rules["rain-caine"].dry_gap_hours == 48.0


@pytest.mark.parametrize(
    "change, message",
    [
        (lambda d: d["trigger"][0].update(clear=1.20), r"clear value 1.2 must lie on the safe side"),
        (lambda d: d["trigger"][0].update(level="purple"), r"'purple' is not a \[\[level\]\] name"),
        (lambda d: d["trigger"][0].update(quantity="tilt"), r"key 'quantity' must be one of"),
        (lambda d: d["trigger"][2].pop("window_hours"), r"key 'window_hours' is missing"),
        (lambda d: d["trigger"][0].update(section="XX-1"), r"'XX-1' is not a \[\[section\]\] id"),
        (lambda d: d["trigger"][0].update(name="data-x"), r"must not start with 'data-'"),
        (lambda d: d["level"][1].update(rank=3), r"rank' 3 is shared with another level"),
        (lambda d: d["level"][1].pop("checklist"), r"key 'checklist' is needed"),
        (lambda d: d["trigger"].append({"section": "WC-040", "name": "new-rule", "quantity": "fos"}),
         r"'new-rule' of section 'WC-040' key 'level' is missing"),
        (lambda d: d["data_alerts"].update(stale_clear_hours=7.0), r"stale_clear_hours' must be >= 0 and below"),
        (lambda d: d["cycle"].update(full_search_every_hours=0), r"full_search_every_hours' must be > 0"),
        (lambda d: d["trigger"][0].update(colour="amber"), r"key 'colour' is unknown"),
        (lambda d: d["trigger"][3].update(dry_gap_hours=0), r"'dry_gap_hours' must be > 0, got 0"),
    ],
)
def test_bad_trigger_configuration_names_the_key(change, message):
    data = _demo()
    change(data)
    config = parse_site_config(data)
    with pytest.raises(ConfigError, match=message):
        alert_settings(config)


def test_a_site_without_trigger_tables_still_has_data_rules():
    data = _demo()
    for key in ("level", "trigger", "data_alerts", "cycle"):
        data.pop(key)
    config, settings = _settings(data)
    names = {r.rule.name for r in settings.rules_for(config, "WC-040")}
    assert names and all(n.startswith("data-") for n in names)
