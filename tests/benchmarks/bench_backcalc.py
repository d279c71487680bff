"""Benchmark of one section's back-analysis (run by `make bench`).

Target (issue 7): the back-analysis of one section completes within 60 s on this machine. The
case is the demo slip of WC-060 (config/slips/wc_060_2026-01.toml) in a fresh demo workspace
with the demo feeds ingested (not timed): locus of 21 phi' values by Spencer's method, the
surface match with its default settings (6 locus points, 4 refinement points, non-circular
optimisation of each), the stood-time check and the sensitivity cases, then the record in the
store. The figures are printed beside the target; nothing is asserted.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from watch.backcalc import run_case  # noqa: E402
from watch.clock import ManualClock  # noqa: E402
from watch.ingest import ingest  # noqa: E402
from watch.workspace import init_workspace  # noqa: E402

TARGET_S = 60.0


def main() -> None:
    with tempfile.TemporaryDirectory() as folder:
        ws = init_workspace(Path(folder) / "ws", ROOT / "config" / "site.toml")
        for section in (ROOT / "config" / "sections").glob("*.toml"):
            shutil.copy(section, ws.sections / section.name)
        now = datetime(2026, 4, 1, 6, tzinfo=timezone.utc)
        ingest(ws, sorted((ROOT / "demo_feeds").glob("*.csv")), now=now, progress=False)
        case = ROOT / "config" / "slips" / "wc_060_2026-01.toml"
        start = time.perf_counter()
        outcome = run_case(ws, case, ManualClock(now))
        elapsed = time.perf_counter() - start
    result = outcome.result
    searches = len(result.matches)
    print(f"back-analysis of {outcome.case.id}: {elapsed:6.1f} s (target <= {TARGET_S:.0f} s, "
          f"ratio {elapsed / TARGET_S:.2f})")
    print(f"  locus points {result.locus.n_points}, solved {int(result.locus.found.sum())}; "
          f"critical-surface searches {searches} ({elapsed / max(searches, 1):.1f} s each, "
          "including the locus, history and sensitivity)")
    best = result.best
    print(f"  best fit c' = {best.cohesion:.2f} kPa, phi' = {best.friction_angle:.2f} deg, "
          f"misfit {best.score:.3f}")


if __name__ == "__main__":
    main()
