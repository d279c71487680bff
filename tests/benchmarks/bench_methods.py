"""Speed of the limit-equilibrium methods on a search-sized batch (run by `make bench`).

Prints the time of each method on about 18,000 circles x about 40 slices through an invented
homogeneous slope, the time per surface, and each method's time relative to Bishop's.
"""

from __future__ import annotations

import time

import numpy as np

from solver.methods import METHOD_NAMES, factor_of_safety
from solver.section import section_from_dict
from solver.slicing import slice_circles

SECTION = {
    "section": {"id": "BENCH"},
    "ground": {"points": [[0, 20.0], [20, 20.0], [40, 10.0], [70, 10.0]]},
    "material": [{"name": "clay", "model": "drained", "unit_weight": 19.0, "cohesion": 8.0,
                  "friction_angle": 28.0, "ru": 0.25}],
    "stratum": [{"material": "clay"}],
}


def _best_of(function, repeats=3):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        times.append(time.perf_counter() - start)
    return min(times), result


def main() -> None:
    section = section_from_dict(SECTION)
    rng = np.random.default_rng(0)
    n = 24000
    centre_y = rng.uniform(22, 50, n)
    batch = slice_circles(section, rng.uniform(20, 50, n), centre_y,
                          centre_y - rng.uniform(0, 10, n), 38)
    slices = batch.slices.select(np.arange(min(18000, batch.slices.n_surfaces)))
    print(f"{slices.n_surfaces} circles x {slices.n_slices} slices, tolerance 1e-4")
    timings = {}
    for method in METHOD_NAMES:
        seconds, result = _best_of(lambda: factor_of_safety(slices, method))
        timings[method] = seconds
        per_surface = 1e6 * seconds / slices.n_surfaces
        print(f"  {method:18s} {seconds:7.3f} s  {per_surface:6.1f} us/surface"
              f"  converged {result.converged.mean():6.1%}  median iterations "
              f"{np.median(result.iterations):.0f}")
    for method in METHOD_NAMES:
        print(f"  ratio {method} / bishop_simplified: "
              f"{timings[method] / timings['bishop_simplified']:.2f}")


if __name__ == "__main__":
    main()
