"""The workspace: one folder holding a site's configuration, feed files, store and reports.

    site.toml        site configuration (docs/formats.md section 2)
    sections/        one section file per cross-section (docs/formats.md section 1)
    incoming/        drop folder: loggers (or people) put feed files here
    processed/       feed files after ingest (never deleted)
    rejected/        files nothing could be read from, each with a ``.reason.txt`` beside it
    reports/         generated reports
    slipwatch.db     the SQLite store

``incoming/.claimed/`` holds files while they are being ingested (claimed by an atomic rename,
so a second ingest cannot take the same file); ``.ingest.lock`` keeps ingests one at a time.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from watch.config import SiteConfig, load_site_config
from watch.errors import WorkspaceError

__all__ = ["Workspace", "check_site", "init_workspace", "open_workspace", "EXAMPLE_SITE_TOML"]

SITE_FILE = "site.toml"
DATABASE_FILE = "slipwatch.db"


@dataclass(frozen=True)
class Workspace:
    root: Path

    @property
    def site_file(self) -> Path:
        return self.root / SITE_FILE

    @property
    def sections(self) -> Path:
        return self.root / "sections"

    @property
    def incoming(self) -> Path:
        return self.root / "incoming"

    @property
    def claimed(self) -> Path:
        return self.incoming / ".claimed"

    @property
    def processed(self) -> Path:
        return self.root / "processed"

    @property
    def rejected(self) -> Path:
        return self.root / "rejected"

    @property
    def reports(self) -> Path:
        return self.root / "reports"

    @property
    def database(self) -> Path:
        return self.root / DATABASE_FILE

    @property
    def lock_file(self) -> Path:
        return self.root / ".ingest.lock"

    @property
    def folders(self) -> tuple[Path, ...]:
        return (self.sections, self.incoming, self.claimed, self.processed, self.rejected, self.reports)

    def config(self) -> SiteConfig:
        """Load site.toml (fresh each call: the file may have been edited) and check all of
        it, also the tables that the alerts, notifications and the service read, so that a
        fault anywhere in the file stops every command at once instead of silently dropping
        a rule (ConfigError naming the file, table and key)."""
        return check_site(load_site_config(self.site_file), self.root)

    def open_store(self, read_only: bool = False):
        from watch.store import Store

        return Store(self.database, read_only=read_only)


def check_site(config: SiteConfig, root: Path) -> SiteConfig:
    """Check the tables of a loaded site file that the alerts, notifications and the service
    read (ConfigError naming the table and key); return the configuration."""
    # Imported here: those modules build on this one.
    from watch.daemon import daemon_settings
    from watch.notify import notify_settings
    from watch.triggers import alert_settings

    alert_settings(config)
    notify_settings(config, root)
    daemon_settings(config, root)
    return config


def init_workspace(directory: Path | str, site_template: Path | str | None = None) -> Workspace:
    """Create a workspace in ``directory`` (created if needed; must not hold one already).

    ``site_template`` is a site.toml to copy; without it a commented invented example is written.
    The template is checked before anything is created, so a bad template leaves no half-made
    workspace behind.
    """
    workspace = Workspace(Path(directory))
    if workspace.site_file.exists() or workspace.database.exists():
        raise WorkspaceError(f"{workspace.root} already holds a workspace (site.toml or slipwatch.db)")
    if workspace.root.exists() and not workspace.root.is_dir():
        raise WorkspaceError(f"{workspace.root} exists and is not a folder")
    if site_template is not None:
        template = Path(site_template)
        check_site(load_site_config(template), workspace.root)  # raises ConfigError naming the key
        text = template.read_text(encoding="utf-8")
    else:
        text = EXAMPLE_SITE_TOML
    for folder in (workspace.root, *workspace.folders):
        folder.mkdir(parents=True, exist_ok=True)
    workspace.site_file.write_text(text, encoding="utf-8")
    from watch.clock import SystemClock  # `slipwatch init` runs on the system clock
    from watch.store import utc_text

    with workspace.open_store() as store, store.atomic():
        store.sync_site(workspace.config(), utc_text(SystemClock().now()))
    return workspace


def open_workspace(directory: Path | str | None = None) -> Workspace:
    """The workspace in ``directory`` (default: $SLIPWATCH_WORKSPACE, else the current folder)."""
    if directory is None:
        directory = os.environ.get("SLIPWATCH_WORKSPACE", ".")
    workspace = Workspace(Path(directory))
    if not workspace.root.is_dir():
        raise WorkspaceError(f"workspace folder {workspace.root} does not exist")
    if not workspace.site_file.exists():
        raise WorkspaceError(
            f"{workspace.root} is not a slipwatch workspace (no site.toml); "
            f"create one with `slipwatch init {workspace.root}` or pass --workspace"
        )
    missing = [f.name for f in workspace.folders if not f.is_dir()]
    if missing:
        raise WorkspaceError(
            f"workspace {workspace.root} lacks the folder(s) {', '.join(missing)}; create them "
            "or re-create the workspace with `slipwatch init`"
        )
    return workspace


EXAMPLE_SITE_TOML = '''\
# slipwatch site file: an invented example. Replace it with your site (docs/formats.md, section 2).

[site]
id = "fernhollow"
name = "Fernhollow Cutting (example)"
owner = "Example Rail Trust"
time_zone = "Europe/London"          # for display; storage is always UTC

# Each cross-section has a section file in sections/ (docs/formats.md, section 1).
[[section]]
id = "FH-010"
file = "sections/fh_010.toml"
gauge = "RG-1"
location = [500.0, 200.0]            # site grid easting, northing [m]

[[piezometer]]
id = "PZ-1"
section = "FH-010"
offset = 24.0                        # along the section [m]
tip_elevation = 44.0                 # [m]
collar_elevation = 55.0              # [m]
water_line = "main"                  # the section's [[water_line]] it informs
reading = "pore_pressure_kpa"        # pore_pressure_kpa | head_m | depth_to_water_m | vibrating_wire
valid_range = [-10.0, 150.0]         # in the reading's own unit
max_rise_rate = 1.0                  # [m of head per hour]; faster rises are flagged as spikes
max_age_hours = 6.0

[[piezometer]]
id = "PZ-2"
section = "FH-010"
offset = 36.0
tip_elevation = 41.5
collar_elevation = 51.0
water_line = "main"
reading = "vibrating_wire"
valid_range = [5000.0, 9500.0]       # [digits]
max_rise_rate = 1.0

[piezometer.calibration]
type = "linear"                      # p = G (R1 - R0) + K (T1 - T0) - (B1 - B0)   [kPa]
gauge_factor = -0.0712               # G [kPa/digit]
zero_reading = 9120.0                # R0 [digits]
temperature_factor = 0.04            # K [kPa/degC]
zero_temperature = 11.0              # T0 [degC]
# polynomial instead: type = "polynomial", polynomial = [A, B, C]

[[rain_gauge]]
id = "RG-1"
location = [480.0, 260.0]
reporting = "tips"                   # interval_mm | cumulative_mm | tips
bucket_mm = 0.2

[[feed]]
name = "cutting-logger"
pattern = "fh_*.csv"                 # glob in incoming/
layout = "wide"
skip_rows = 0
time_column = "Timestamp"
time_format = "%Y-%m-%d %H:%M"
time_zone = "Europe/London"          # logger clock; clock-change hours are checked
delimiter = ","
decimal = "."
missing = ["", "-9999", "NAN"]
[feed.columns]
"PZ1_kPa" = "PZ-1"
"PZ2_digits" = "PZ-2"
"Rain_tips" = "RG-1"
[feed.temperature_columns]
"PZ2_degC" = "PZ-2"

[ingest]
min_file_age_seconds = 30
future_tolerance_minutes = 10
oldest_reading = "2000-01-01"
flat_line_hours = 24
stale_hours = 6
# done_suffix = ".done"              # when the logger writes NAME.done after NAME
'''
