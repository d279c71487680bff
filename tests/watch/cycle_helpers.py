"""Helpers of the cycle and season-replay tests: a workspace made from the demo configuration,
and the outbox read alarm by alarm."""

import json
import shutil
from pathlib import Path

from watch.workspace import init_workspace

ROOT = Path(__file__).resolve().parents[2]


def make_workspace(folder: Path, extra_toml: str = ""):
    site = folder.parent / f"{folder.name}-site.toml"
    site.write_text((ROOT / "config" / "site.toml").read_text(encoding="utf-8") + extra_toml, encoding="utf-8")
    workspace = init_workspace(folder, site)
    for section in (ROOT / "config" / "sections").glob("*.toml"):
        shutil.copy(section, workspace.sections / section.name)
    return workspace


def announced_alarms(workspace) -> tuple[dict, set]:
    """Every outbox row by alarm (section, rule, episode), checking that each alarm people
    were told of (by a firing, escalated or data row, or by being named as still standing in
    a de-escalation) is closed at most once, and that nothing is closed without having been
    announced. Returns ({alarm: [kinds]}, alarms announced and not closed)."""
    with workspace.open_store(read_only=True) as store:
        rows = store.outbox()
    told, closed, kinds = set(), [], {}
    for row in rows:
        section, rule, episode, kind = row["idempotency_key"].split("/")
        # One row announces every rule of its level that changed alike in the cycle (its
        # payload's "rules"); the key names the first.
        rules = json.loads(row["payload_json"]).get("rules") or [{"rule": rule, "episode": int(episode)}]
        for key in [(section, r["rule"], int(r["episode"])) for r in rules]:
            kinds.setdefault(key, []).append(kind)
            if kind in ("firing", "escalated", "data"):
                told.add(key)
            elif kind in ("resolved", "de-escalated"):
                assert key in told, f"{key} closed without being announced"
                closed.append(key)
        if kind == "de-escalated":
            told.update((section, s["rule"], s["episode"]) for s in json.loads(row["payload_json"])["standing"])
    assert len(closed) == len(set(closed)), "an alarm was closed twice"
    return kinds, told - set(closed)
