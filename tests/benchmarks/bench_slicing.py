"""Benchmark: slice a grid search of 18,000 trial circles (30 x 30 centres x 20 radii, 30 slices
each) on a three-layer section with a water line; print circles per second, the rejection
tally and peak memory. Target: slicing well under 0.5 s on one core, so that slicing plus
Bishop's simplified method to 1e-4 fits in about 1 s.

Run: .venv/bin/python tests/benchmarks/bench_slicing.py
"""

from __future__ import annotations

import resource
import time
import tracemalloc

import numpy as np

from solver.section import section_from_dict
from solver.slicing import slice_circles

SECTION = {
    "section": {"id": "BENCH", "name": "three layers, one water line (invented)"},
    "ground": {"points": [[0, 30.0], [20, 30.0], [45, 15.0], [70, 12.0], [90, 12.0]]},
    "base": {"points": [[0, -5.0], [90, -5.0]]},
    "material": [
        {"name": "Topsoil", "unit_weight": 18.0, "unit_weight_saturated": 20.0,
         "cohesion": 3.0, "friction_angle": 28.0, "water": "main"},
        {"name": "Sand", "unit_weight": 19.0, "unit_weight_saturated": 21.0,
         "cohesion": 0.0, "friction_angle": 34.0, "water": "main"},
        {"name": "Marl", "unit_weight": 20.0, "unit_weight_saturated": 22.0,
         "cohesion": 12.0, "friction_angle": 24.0, "water": "main"},
    ],
    "stratum": [
        {"material": "Topsoil", "bottom": [[0, 26.0], [30, 20.0], [90, 8.0]]},
        {"material": "Sand", "bottom": [[0, 18.0], [50, 6.0], [90, 2.0]]},
        {"material": "Marl"},
    ],
    "water_line": [{"name": "main", "points": [[0, 27.0], [40, 18.0], [60, 13.0], [90, 11.5]]}],
}


def grid():
    cx, cy = np.meshgrid(np.linspace(25, 65, 30), np.linspace(32, 70, 30), indexing="ij")
    cx, cy = cx.ravel(), cy.ravel()
    # 20 radii per centre, from a shallow circle to one near the base.
    fraction = np.linspace(0.05, 1.0, 20)
    lowest = 30.0 - fraction[None, :] * 34.0
    radius = np.clip(cy[:, None] - lowest, 1.0, None)
    return np.repeat(cx, 20), np.repeat(cy, 20), radius.ravel()


def main() -> None:
    section = section_from_dict(SECTION)
    cx, cy, r = grid()
    slice_circles(section, cx[:100], cy[:100], r[:100])  # warm-up (imports, caches)
    runs = []
    for _ in range(5):
        start = time.perf_counter()
        batch = slice_circles(section, cx, cy, r, n_slices=30)
        runs.append(time.perf_counter() - start)
    best = min(runs)
    print(f"circles: {cx.size}, valid: {batch.valid.sum()}, slices per surface (padded): "
          f"{batch.slices.n_slices}")
    for reason, count in batch.rejected().most_common():
        print(f"  rejected: {count:6d}  {reason}")
    print(f"slicing: best of 5 = {best:.3f} s, {cx.size / best:,.0f} circles/s "
          f"(target < 0.5 s: ratio {best / 0.5:.2f})")

    try:
        from solver.methods import factor_of_safety
    except ImportError as error:  # the methods module is written separately
        print(f"Bishop timing skipped: {error}")
    else:
        start = time.perf_counter()
        result = factor_of_safety(batch.slices, method="bishop_simplified", tolerance=1e-4)
        solve = time.perf_counter() - start
        print(f"Bishop simplified (tol 1e-4) on the valid circles: {solve:.3f} s; slicing + "
              f"Bishop = {best + solve:.3f} s (target about 1 s: ratio {(best + solve):.2f}); "
              f"min FoS {np.nanmin(result.fos):.3f}")

    tracemalloc.start()
    slice_circles(section, cx, cy, r, n_slices=30)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak traced memory of one slicing call: {peak / 2**20:.0f} MiB; "
          f"process max RSS {rss:.0f} MiB")


if __name__ == "__main__":
    main()
