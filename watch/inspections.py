"""Site-inspection requests: opened once per firing episode at the levels the owner chooses
(``[[level]] inspection_due_hours`` and ``checklist``), listed, exported as CSV and closed with a
note by whoever inspected."""

from __future__ import annotations

import csv
import json
from datetime import datetime, timedelta
from pathlib import Path

from watch.clock import Clock
from watch.errors import UserError
from watch.formatting import plain_number
from watch.store import Store, parse_utc_text, utc_text
from watch.workspace import Workspace

__all__ = ["open_request", "open_at", "list_inspections", "close_inspection", "write_csv", "CSV_COLUMNS"]

CSV_COLUMNS = ("id", "section_id", "level", "status", "requested_utc", "due_utc", "overdue", "reason",
               "checklist", "alert_id", "episode", "completed_utc", "closed_by", "notes")  # fmt: skip


def open_request(store: Store, section_id: str, alert_id: int, rule: str, level, episode: int,
                 now: datetime, reason: str) -> int | None:  # fmt: skip
    """Open the inspection request of an alert's firing episode (inside atomic()); None when
    that episode already has one, so a repeated cycle opens nothing twice."""
    return store.open_inspection({
        "section_id": section_id, "alert_id": alert_id, "reason": f"{rule}: {reason}",
        "status": "open", "requested_utc": utc_text(now), "level": level.name, "episode": episode,
        "due_utc": utc_text(now + timedelta(hours=level.inspection_due_hours)),
        "checklist_json": json.dumps(list(level.checklist)),
    })  # fmt: skip


def open_at(rows: list[dict], at: datetime) -> list[dict]:
    """The inspection requests (rows of ``inspections``) that were open at ``at``: requested
    by then and not closed by then."""
    at_text = utc_text(at)
    return [r for r in rows if r["requested_utc"] <= at_text
            and (r["completed_utc"] is None or r["completed_utc"] > at_text)]  # fmt: skip


def list_inspections(workspace: Workspace, clock: Clock, open_only: bool = False) -> list[dict]:
    """Inspection requests, oldest first, with ``overdue`` worked out at the clock's now."""
    now = clock.now()
    with workspace.open_store(read_only=True) as store:
        rows = store.inspection_rows(open_only=open_only)
    for row in rows:
        row["checklist"] = json.loads(row.pop("checklist_json") or "[]")
        row["overdue"] = bool(row["status"] == "open" and row["due_utc"] and parse_utc_text(row["due_utc"]) < now)
    return rows


def close_inspection(workspace: Workspace, clock: Clock, inspection_id: int, note: str, by: str) -> dict:
    """Close an open request with what was found (``note``) and who inspected (``by``)."""
    if not note.strip() or not by.strip():
        raise UserError("closing an inspection needs what was found (--note TEXT) and who (--by NAME)")
    now = clock.now()
    with workspace.open_store() as store, store.atomic():
        row = next((r for r in store.inspection_rows() if r["id"] == inspection_id), None)
        if row is None:
            raise UserError(f"no inspection request {inspection_id}; list them with `slipwatch inspections`")
        if row["status"] != "open":
            raise UserError(f"inspection request {inspection_id} is already closed "
                            f"({row['completed_utc']} by {row['closed_by']})")  # fmt: skip
        store.close_inspection(inspection_id, utc_text(now), by, note)
    return {**row, "status": "closed", "completed_utc": utc_text(now), "closed_by": by, "notes": note}


def write_csv(rows: list[dict], path: Path) -> Path:
    """Write inspection requests (as :func:`list_inspections` gives them) to a CSV file."""
    path = Path(path)
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=CSV_COLUMNS, extrasaction="ignore")
        writer.writeheader()
        for row in rows:
            writer.writerow({**{k: plain_number(v) for k, v in row.items()},
                             "checklist": "; ".join(row.get("checklist", []))})
    return path
