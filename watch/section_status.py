"""The state of every section for ``slipwatch status``: worst first, with its factor of safety,
level, trend, age of the newest reading, open alerts, open inspections and data problems.

The factor of safety shown (``fos``, its trend) is the newest on live readings; a newer one on
the design water lines (no live readings) is given apart (``fos_on_design_lines``) and said to
be so among the data problems, never as a calculation that did not converge."""

from __future__ import annotations

from datetime import datetime, timedelta

from watch.alert_history import alerts_as_at
from watch.alerting import record_of
from watch.alerts import AlertState, is_chattering
from watch.assessment_status import (
    FAILED,
    FOS_BASIS_READINGS,
    NOT_CONVERGED,
    on_design_lines,
    status_words,
)
from watch.caution import CAUTION
from watch.inspections import open_at
from watch.lifecycle import IN_SERVICE, service_states
from watch.store import parse_utc_text, utc_text
from watch.triggers import alert_settings, section_gauge
from watch.workspace import Workspace

__all__ = ["sections_status", "format_sections"]


def sections_status(workspace: Workspace, now: datetime) -> list[dict]:
    """One dict per section of the site file as at ``now``, worst first: a section not in
    service, then firing level rank, then data problems, then lowest factor of safety.
    Assessments, alert states (rebuilt from their events), inspections and service states are
    those of ``now``, so a past ``now`` shows the state as it was then."""
    config = workspace.config()
    cycle = alert_settings(config).cycle
    window = timedelta(hours=cycle.chatter_window_hours)
    now_text = utc_text(now)
    result = []
    with workspace.open_store(read_only=True) as store:
        states = service_states(store, now)
        for ref in config.sections:
            last = store.last_assessment(ref.id, now_text, with_fos=True)
            newest = store.last_assessment(ref.id, now_text)
            earlier = None
            if last is not None:
                earlier = store.last_assessment(
                    ref.id, utc_text(parse_utc_text(last["time_utc"]) - timedelta(hours=24)), with_fos=True)
            alerts = alerts_as_at(store, now, ref.id)
            firing = [a for a in alerts if a["state"] == AlertState.FIRING.value]
            open_alerts = [a for a in alerts if a["state"] in (AlertState.FIRING.value, AlertState.PENDING.value)]
            levels = sorted((a for a in firing if a["kind"] == "level"), key=lambda a: -a["rank"])
            data = [f"{a['rule']}: {a['message']}" for a in firing if a["kind"] == "data"]
            design = newest is not None and on_design_lines(newest["status"]) and newest["fos"] is not None
            if design:
                data.append(f"latest factor of safety {newest['fos']:.2f} ({newest['time_utc']}) is on the "
                            "design water lines: no live readings, not a result of the readings")
            elif newest is not None and newest["status"] in (FAILED, NOT_CONVERGED):
                data.append(f"last assessment {status_words(newest['status'])}: {newest['message']}")
            gauge = section_gauge(config, ref.id)
            instruments = [p.id for p in config.piezometers_of(ref.id)] + ([gauge] if gauge else [])
            times = [r["time_utc"] for i in instruments if (r := store.newest_reading(i, now_text))]
            newest_reading = max(times) if times else None
            inspections = open_at(store.inspection_rows(section_id=ref.id), now)
            state = states.get(ref.id)
            out = state is not None and not state.in_service
            result.append({
                "section_id": ref.id,
                "service_state": state.state if state else IN_SERVICE,
                "service_state_since_utc": state.time_utc if state else None,
                "service_state_note": f"set by {state.by}: {state.note}" if state else None,
                "fos": last["fos"] if last else None,
                "fos_basis": FOS_BASIS_READINGS if last else None,
                "method": last["method"] if last else None,
                "assessed_utc": last["time_utc"] if last else None,
                "latest_assessment_status": newest["status"] if newest else None,
                "latest_assessment_utc": newest["time_utc"] if newest else None,
                "fos_on_design_lines": newest["fos"] if design else None,
                "fos_change_24h": (last["fos"] - earlier["fos"]) if last and earlier else None,
                # A section out of service shows its state instead of a level.
                "level": None if out or not levels else levels[0]["level"],
                "rank": 0 if out or not levels else levels[0]["rank"],
                "newest_reading_utc": newest_reading,
                "reading_age_h": None if newest_reading is None else
                round((now - parse_utc_text(newest_reading)).total_seconds() / 3600, 2),
                "open_alerts": [f"{a['rule']} ({a['state']})" for a in open_alerts],
                "open_inspections": [i["id"] for i in inspections],
                "data_problems": data,
                "chattering": [a["rule"] for a in alerts
                               if is_chattering(record_of(a), window, cycle.chatter_max_changes, now)],
            })  # fmt: skip
    result.sort(key=lambda s: (s["service_state"] == IN_SERVICE, -s["rank"], -len(s["data_problems"]),
                               s["fos"] if s["fos"] is not None else -1.0))  # fmt: skip
    return result


def format_sections(rows: list[dict]) -> list[str]:
    """Text lines of the section table, with the caution."""
    lines = ["sections (worst first):"]
    for s in rows:
        fos = "  n/a" if s["fos"] is None else f"{s['fos']:.2f}"
        if s["fos_on_design_lines"] is not None:
            fos += f" (newer on design lines {s['fos_on_design_lines']:.2f})"
        # Rounded first, so that a change below 0.005 reads +0.00, never -0.00.
        trend = "" if s["fos_change_24h"] is None else f" ({round(s['fos_change_24h'], 2) + 0.0:+.2f}/24 h)"
        hours = s["reading_age_h"]
        age = "never" if hours is None else f"{hours:.1f} h" if hours < 48 else f"{hours / 24:.1f} d"
        level = s["level"] or "-" if s["service_state"] == IN_SERVICE else s["service_state"].upper()
        lines.append(
            f"  {s['section_id']:<10} FoS {fos}{trend:<15} level {level:<8} "
            f"newest reading {age:<9} open alerts {len(s['open_alerts'])}, "
            f"open inspections {len(s['open_inspections'])}"
        )
        if s["service_state"] != IN_SERVICE:
            lines.append(f"      {s['service_state'].replace('-', ' ')} since {s['service_state_since_utc']} "
                         f"({s['service_state_note']}): not assessed, alerts held")
        lines += [f"      data problem: {p}" for p in s["data_problems"]]
    lines.append(CAUTION)
    return lines
