"""Benchmark of the critical-surface search and of warm re-evaluation (run by `make bench`).

Targets (issue 3): a grid search of about 18,000 circles (30 x 30 centres x 20 radii), at least
30 slices each, on a three-layer section with a water line, Bishop's simplified method to
1e-4, in at most 1 s on one core; at most 3 times a minimal numpy kernel that pushes the same
number of slice values through the same number of Bishop updates from precomputed arrays (no
geometry); warm re-evaluation after a water-line change in at most 20 ms per section; peak
memory of the search at most 500 MB.

Figures are printed beside their targets; nothing is asserted (wall-clock limits do not belong
in unit tests).
"""

from __future__ import annotations

import os

# One core: keep any threaded numerical library to a single thread.
for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import resource  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402
from pathlib import Path  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np  # noqa: E402

from solver.methods import bishop_screening  # noqa: E402
from solver.search import (  # noqa: E402
    SearchSettings,
    default_centre_lattice,
    centre_lattice,
    lattice_circles,
    refine_circle,
    warm_reevaluate,
)
from solver.section import section_from_dict  # noqa: E402
from solver.slicing import slice_circles  # noqa: E402

REPEATS = 3


def three_layer_section():
    """An invented cutting: till over weak clay over mudstone, one water line."""
    return section_from_dict(
        {
            "section": {"id": "BENCH-3"},
            "ground": {"points": [[0, 20], [30, 20], [50, 10], [80, 10]]},
            "material": [
                {"name": "Till", "model": "drained", "unit_weight": 19.0,
                 "unit_weight_saturated": 20.0, "cohesion": 5.0, "friction_angle": 28.0,
                 "water": "main"},
                {"name": "Weak clay", "model": "drained", "unit_weight": 18.0, "cohesion": 2.0,
                 "friction_angle": 18.0, "water": "main"},
                {"name": "Mudstone", "model": "drained", "unit_weight": 22.0, "cohesion": 50.0,
                 "friction_angle": 40.0, "water": "main"},
            ],
            "stratum": [
                {"material": "Till", "bottom": [[0, 12], [80, 6]]},
                {"material": "Weak clay", "bottom": [[0, 10], [80, 4]]},
                {"material": "Mudstone"},
            ],
            "water_line": [{"name": "main", "points": [[0, 16], [50, 10.5], [80, 10.5]]}],
        }
    )


def bishop_kernel(weight, alpha, cohesion, tan_phi, pore_pressure, width, active, n_updates):
    """Bishop's simplified method from precomputed slice arrays, no geometry:
    F = sum[(c b + (W - u b) tan(phi)) / m_alpha] / sum(W sin(alpha)),
    m_alpha = cos(alpha) (1 + tan(alpha) tan(phi) / F) (Bishop 1955).

    Everything that does not depend on F is computed before the passes (padding slices get a
    zero numerator, so no mask is needed inside the loop), and each pass writes into one
    scratch array: the same numpy techniques as the solver's own update, so that the ratio
    measures the solver's overhead rather than a difference in coding style."""
    weight = np.where(active, weight, 0.0)
    numerator = np.where(active, cohesion * width + (weight - pore_pressure * width) * tan_phi,
                         0.0)
    cos_a = np.cos(alpha)
    cos_tan = cos_a * np.tan(alpha) * tan_phi
    driving = np.sum(weight * np.sin(alpha), axis=1)
    fos = np.ones(weight.shape[0])
    scratch = np.empty(weight.shape)
    for _ in range(n_updates):
        np.divide(cos_tan, fos[:, None], out=scratch)
        scratch += cos_a
        np.divide(numerator, scratch, out=scratch)
        fos = scratch.sum(axis=1) / driving
    return fos


def timed(function, repeats=REPEATS):
    times = []
    value = None
    for _ in range(repeats):
        start = time.perf_counter()
        value = function()
        times.append(time.perf_counter() - start)
    return statistics.median(times), value


def verdict(ok: bool) -> str:
    return "met" if ok else "NOT MET"


def main() -> None:
    section = three_layer_section()
    settings = SearchSettings(method="bishop_simplified", n_slices=30, tolerance=1e-4,
                              min_depth=1.0)
    grid = default_centre_lattice(section, nx=30, ny=30, n_radii=20)
    circles = lattice_circles(grid["x_range"], grid["y_range"], grid["nx"], grid["ny"],
                           tangent_elevations=grid["tangent_elevations"])
    n_circles = circles[0].size

    search_time, result = timed(lambda: centre_lattice(section, settings, **grid))

    # Where the time goes: slicing and the method alone, on the same circles in the same
    # batches and with the same calls as the search (which screens with bishop_screening).
    # The kernel repeats, batch by batch, as many Bishop updates on every surface of the batch
    # as the method needed for its slowest surface (the method itself stops updating each
    # surface once it has converged, which is its own saving).
    slicing_time = method_time = kernel_time = 0.0
    slice_values = 0
    updates = []
    for start in range(0, n_circles, settings.batch_size):
        part = tuple(c[start:start + settings.batch_size] for c in circles)
        seconds, batch = timed(lambda: slice_circles(section, *part, n_slices=30,
                                                     weight_centroid=section.kh != 0))
        slicing_time += seconds
        seconds, solved = timed(lambda: bishop_screening(batch.slices, tolerance=1e-4))
        method_time += seconds
        slices = batch.slices
        n_updates = int(solved.iterations.max())
        updates.append(n_updates)
        slice_values += slices.weight.size * n_updates
        arrays = (slices.weight, slices.alpha, slices.cohesion, slices.tan_phi,
                  slices.pore_pressure, slices.width, slices.active)
        with np.errstate(all="ignore"):
            seconds, _ = timed(lambda: bishop_kernel(*arrays, n_updates))
        kernel_time += seconds

    tracemalloc.start()
    centre_lattice(section, settings, **grid)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    peak_mb = peak / 1e6
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

    refined = refine_circle(section, result)
    wetter = section.with_water_lines({"main": [[0, 18.5], [50, 10.5], [80, 10.5]]})
    warm_times = []
    for _ in range(20):
        start = time.perf_counter()
        warm = warm_reevaluate(wetter, refined)
        warm_times.append(time.perf_counter() - start)
    warm_ms = 1e3 * statistics.median(warm_times)

    ratio = search_time / kernel_time
    rate = n_circles / search_time
    print(f"Grid search: {n_circles} circles ({grid['nx']} x {grid['ny']} centres x "
          f"{len(grid['tangent_elevations'])} tangents), {slices.n_slices} slice columns "
          f"(30 requested + geometry breaks), {result.n_valid} admissible, Bishop to 1e-4, "
          f"batches of {settings.batch_size}")
    print(f"  critical FoS {result.fos:.4f}; refined {refined.fos:.4f}")
    print(f"{'figure':<44}{'value':>14}   {'target':<14}verdict")
    rows = [
        ("search time [s]", f"{search_time:.3f}", "<= 1 s", search_time <= 1.0),
        ("circles per second", f"{rate:,.0f}", ">= 18,000", rate >= 18000),
        ("search / minimal Bishop kernel", f"{ratio:.2f}", "<= 3", ratio <= 3.0),
        ("warm re-evaluation [ms per section]", f"{warm_ms:.1f}", "<= 20 ms", warm_ms <= 20.0),
        ("peak memory of the search, traced [MB]", f"{peak_mb:.0f}", "<= 500 MB", peak_mb <= 500),
    ]
    for name, value, target, ok in rows:
        print(f"  {name:<42}{value:>14}   {target:<14}{verdict(ok)}")
    print(f"  process peak resident memory [MB]: {rss_mb:.0f} (includes Python and libraries)")
    print("Where the search time goes (same circles, median of "
          f"{REPEATS}):")
    print(f"  slice_circles (solver/slicing.py)        {slicing_time:.3f} s")
    print(f"  bishop_screening (passes per batch {updates})  {method_time:.3f} s")
    print(f"  minimal Bishop kernel, same passes ({slice_values:,} slice updates)  "
          f"{kernel_time:.3f} s")
    other = search_time - slicing_time - method_time
    print(f"  remainder: search.py bookkeeping + timing noise  {other:.3f} s")
    print(f"  warm re-evaluation: {len(refined.surfaces)} cached surfaces, FoS "
          f"{refined.fos:.4f} -> {warm.fos:.4f}, full search advised: "
          f"{warm.full_search_advised}")


if __name__ == "__main__":
    main()
