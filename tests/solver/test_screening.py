"""Bishop's screening path of the search gives the full method's values and flags.

The search ranks thousands of trial circles with :func:`solver.methods.bishop_screening`,
which skips the per-slice audit tables; these checks hold it to :func:`bishop_simplified`
(Bishop 1955) surface by surface, on invented sections with the loads that enter the moment
equation (kh, tension-crack water, ponded water, strip surcharge) and without them.
"""

from __future__ import annotations

from collections import Counter

import numpy as np
import pytest

from solver.errors import MethodError
from solver.methods import bishop_screening, bishop_simplified, factor_of_safety
from solver.search import SearchSettings, _screen, lattice_circles
from solver.section import section_from_dict
from solver.slicing import slice_circles

from tests.solver.slice_fixtures import pad


def _cutting(**changes) -> dict:
    """Two drained layers under a cutting with a water line (invented)."""
    data = {
        "section": {"id": "SCREEN"},
        "ground": {"points": [[0, 20.0], [30, 20.0], [50, 10.0], [80, 10.0]]},
        "material": [
            {"name": "Till", "unit_weight": 19.0, "unit_weight_saturated": 20.0,
             "cohesion": 5.0, "friction_angle": 28.0, "water": "main"},
            {"name": "Clay", "unit_weight": 18.0, "cohesion": 2.0, "friction_angle": 18.0,
             "water": "main"},
        ],
        "stratum": [{"material": "Till", "bottom": [[0, 12.0], [80, 6.0]]},
                    {"material": "Clay"}],
        "water_line": [{"name": "main", "points": [[0, 16.0], [50, 10.5], [80, 10.5]]}],
    }
    data.update(changes)
    return data


SECTIONS = {
    "plain": _cutting(),
    "kh": _cutting(seismic={"kh": 0.15}),
    "crack": _cutting(tension_crack={"depth": 2.0, "water_depth": 1.0}),
    "surcharge": _cutting(surcharge=[{"x_from": 20.0, "x_to": 28.0, "pressure": 30.0}]),
    "pond": _cutting(
        ground={"points": [[0, 20.0], [30, 20.0], [50, 10.0], [80, 10.0]], "pond": True},
        water_line=[{"name": "main", "points": [[0, 16.0], [45, 12.5], [80, 12.5]]}]),
}


def _circles():
    # Low centres give steep toe circles, where m_alpha falls and iterations fail.
    return lattice_circles((25.0, 60.0), (12.0, 45.0), 12, 12,
                        tangent_elevations=np.linspace(3.0, 15.0, 8))


@pytest.mark.parametrize("name", list(SECTIONS))
def test_screening_matches_bishop_simplified_surface_by_surface(name):
    section = section_from_dict(SECTIONS[name])
    slices = slice_circles(section, *_circles(), n_slices=30).slices
    full = bishop_simplified(slices, tolerance=1e-4)
    screened = bishop_screening(slices, tolerance=1e-4)
    # Same iteration, so the same numbers: rtol is rounding only.
    np.testing.assert_allclose(screened.fos, full.fos, rtol=1e-12, equal_nan=True)
    np.testing.assert_allclose(screened.last_iterate, full.last_iterate, rtol=1e-12,
                               equal_nan=True)
    np.testing.assert_array_equal(screened.converged, full.converged)
    np.testing.assert_array_equal(screened.admissible, full.admissible)
    np.testing.assert_array_equal(screened.iterations, full.iterations)
    np.testing.assert_array_equal(screened.low_m_alpha, full.low_m_alpha)
    np.testing.assert_array_equal(screened.negative_normal, full.negative_normal)
    # The flags are the ones the messages put in words.
    np.testing.assert_array_equal(full.low_m_alpha, ["m_alpha" in m for m in full.message])
    np.testing.assert_array_equal(full.negative_normal,
                                  ["negative effective" in m for m in full.message])
    # The grid must exercise what is compared: converged and failed or flagged surfaces.
    assert full.converged.any() and not full.admissible.all()


@pytest.mark.parametrize("method", ["bishop_simplified", "spencer"])
def test_search_counts_doubtful_surfaces_from_the_flags_of_the_full_result(method):
    section = section_from_dict(SECTIONS["kh"])
    slices = slice_circles(section, *_circles(), n_slices=30).slices
    settings = SearchSettings(method=method, tolerance=1e-4)
    _, _, converged, doubtful, reasons = _screen(slices, settings)
    full = factor_of_safety(slices, method, tolerance=1e-4)
    set_aside = full.converged & ~full.admissible & full.low_m_alpha
    np.testing.assert_array_equal(doubtful & converged, set_aside)
    tension = int((set_aside & full.negative_normal).sum())
    base = "not admissible: m_alpha <= M_ALPHA_MIN at a slice base"
    expected = +Counter({base: int(set_aside.sum()) - tension,
                         base + "; negative effective normal force at a frictional slice base":
                         tension})
    assert sum(expected.values()) > 0
    assert reasons(doubtful & converged) == expected


def test_screening_ignores_what_padding_slices_hold():
    section = section_from_dict(SECTIONS["kh"])
    slices = slice_circles(section, *_circles(), n_slices=30).slices
    padded = pad(slices, leading=2, trailing=3)
    # Elevations of padding slices mean nothing; the screening zeroes them.
    padded.y_base[:, :2] = np.nan
    padded.y_top[:, -3:] = np.nan
    np.testing.assert_allclose(bishop_screening(padded).fos, bishop_simplified(slices).fos,
                               rtol=1e-12, equal_nan=True)


def test_slicing_without_the_weight_centroid_changes_nothing_else():
    section = section_from_dict(SECTIONS["surcharge"])
    full = slice_circles(section, *_circles(), n_slices=30)
    lean = slice_circles(section, *_circles(), n_slices=30, weight_centroid=False)
    np.testing.assert_array_equal(lean.valid, full.valid)
    np.testing.assert_array_equal(lean.reason, full.reason)
    for name in full.slices.__dataclass_fields__:
        if name != "y_weight":
            np.testing.assert_array_equal(getattr(lean.slices, name),
                                          getattr(full.slices, name), err_msg=name)


def test_slicing_without_the_weight_centroid_refuses_kh():
    section = section_from_dict(SECTIONS["kh"])
    with pytest.raises(MethodError, match=r"weight_centroid=False needs kh = 0.*kh = 0\.15"):
        slice_circles(section, 40.0, 30.0, 20.0, weight_centroid=False)
