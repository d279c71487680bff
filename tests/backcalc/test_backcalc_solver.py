"""Tests of solver.backcalc: the FoS = 1 locus, surface match, history and sensitivity.

The sections here are synthetic test slopes (not published cases); the checks rest on exact
properties of the equations, named beside each check.
"""

from __future__ import annotations

import numpy as np
import pytest

from solver.backcalc import (
    BackAnalysisSettings,
    MatchSettings,
    NoSolutionError,
    ObservedSlip,
    ObservedSurfaceError,
    StoodCondition,
    back_analyse,
    fos_unity_locus,
    fos_with_strength,
    history_constraints,
    sensitivity,
    surface_misfit,
    with_strength,
)
from solver.methods import factor_of_safety
from solver.search import SearchSettings, search_critical_surface
from solver.section import section_from_dict
from solver.slicing import slice_polyline

GROUND = [[0.0, 20.0], [10.0, 20.0], [30.0, 10.0], [50.0, 10.0]]


def homogeneous(cohesion=10.0, friction_angle=25.0):
    """A 10 m high 1V:2H slope in one dry c'-phi' soil (synthetic)."""
    return section_from_dict({
        "section": {"id": "H"},
        "ground": {"points": GROUND},
        "material": [{"name": "Clay", "unit_weight": 19.0, "cohesion": cohesion,
                      "friction_angle": friction_angle, "water": "none"}],
        "stratum": [{"material": "Clay"}],
    })


#: Water line at failure of the layered slope: high behind the crest after a wet spell.
WET = [[0.0, 19.5], [12.0, 18.5], [30.0, 11.0], [50.0, 10.0]]


def layered(water=None):
    """Till over a weak clay layer over rock, with one water line (synthetic)."""
    water = water if water is not None else WET
    return section_from_dict({
        "section": {"id": "L"},
        "ground": {"points": GROUND},
        "base": {"points": [[0.0, 0.0], [50.0, 0.0]]},
        "material": [
            {"name": "Till", "unit_weight": 19.0, "unit_weight_saturated": 20.0,
             "cohesion": 5.0, "friction_angle": 30.0, "water": "w"},
            {"name": "Weak", "unit_weight": 18.0, "unit_weight_saturated": 19.0,
             "cohesion": 2.0, "friction_angle": 20.0, "water": "w"},
            {"name": "Rock", "unit_weight": 22.0, "cohesion": 50.0, "friction_angle": 40.0,
             "water": "w"},
        ],
        "stratum": [
            {"material": "Till", "bottom": [[0.0, 11.0], [50.0, 8.0]]},
            {"material": "Weak", "bottom": [[0.0, 9.5], [50.0, 6.5]]},
            {"material": "Rock"},
        ],
        "water_line": [{"name": "w", "points": water}],
    })


#: A composite surface: steep through the till, along the weak layer, out at the toe.
COMPOSITE = [[8.0, 20.0], [11.0, 16.0], [14.0, 12.0], [18.0, 9.6], [26.0, 9.1], [31.0, 9.4],
             [33.0, 10.0]]


def test_locus_gives_fos_one_on_the_observed_surface():
    slip = ObservedSlip(layered(), COMPOSITE)
    locus = fos_unity_locus(slip, "Weak", friction_angles=[5.0, 15.0, 25.0])
    assert locus.found.all()
    assert locus.method == "spencer"
    # Definition of the locus (Duncan, Wright and Brandon 2014, ch. 11): F = 1 at each pair,
    # checked by an independent slicing of the section with that strength.
    for c, phi in zip(locus.cohesion, locus.friction_angle):
        section = with_strength(layered(), "Weak", cohesion=c, friction_angle=phi)
        slices = slice_polyline(section, COMPOSITE).slices
        fos = factor_of_safety(slices, "spencer", tolerance=1e-9, max_iterations=300).fos[0]
        np.testing.assert_allclose(fos, 1.0, rtol=1e-5)
    # F rises with c' and with phi', so c' falls along the locus.
    assert np.all(np.diff(locus.cohesion) < 0)


def test_ordinary_method_locus_is_a_straight_line_in_c_and_tan_phi():
    # Ordinary method (Fellenius 1936): on a fixed surface N' does not depend on F, so
    # F = (sum c' l R + sum N' tan(phi') R + other materials) / driving moment. F = 1 is then
    # linear in c' and tan(phi') of the target material: c' = a - b tan(phi') exactly.
    settings = BackAnalysisSettings(method="ordinary", strength_tolerance=1e-10)
    slip = ObservedSlip(layered(), COMPOSITE)
    locus = fos_unity_locus(slip, "Weak", friction_angles=np.arange(0.0, 31.0, 3.0),
                            settings=settings)
    found = locus.found
    assert found.sum() >= 8
    c, t = locus.cohesion[found], np.tan(np.radians(locus.friction_angle[found]))
    slope = (c[-1] - c[0]) / (t[-1] - t[0])
    np.testing.assert_allclose(c, c[0] + slope * (t - t[0]), rtol=0, atol=1e-7)
    # ... and the line's slope is -sum(N' l R)/sum(l R) over the weak-layer bases, which is
    # negative (N' > 0 there).
    assert slope < 0


def test_round_trip_recovers_known_parameters_and_a_different_surface_fits_worse():
    # A homogeneous slope whose strength (c0, phi0) is scaled by its critical FoS F0 has F = 1
    # on the same critical surface (F is a strength reduction factor), so the pair
    # (c0 / F0, atan(tan(phi0) / F0)) lies on the locus of that surface and makes it critical.
    start = homogeneous(10.0, 25.0)
    settings = SearchSettings(method="spencer")
    found = search_critical_surface(start, settings, screen_with="bishop_simplified").critical
    f0 = found.fos
    c_true = 10.0 / f0
    phi_true = np.degrees(np.arctan(np.tan(np.radians(25.0)) / f0))
    x = np.linspace(found.scarp_x, found.toe_x, 60)
    y = found.centre_y - np.sqrt(found.radius**2 - (x - found.centre_x) ** 2)
    y[0], y[-1] = np.interp([x[0], x[-1]], *np.array(GROUND).T) + 1e-6
    observed = np.column_stack([x, y])

    truth = homogeneous(c_true, phi_true)
    result = back_analyse(
        ObservedSlip(truth, observed), "Clay", friction_angles=np.arange(10.0, 36.0, 2.5),
        match=MatchSettings(points=6, refine=3, non_circular=False),
        water_change=None, unit_weight_change=None,
    )
    # Tolerance: the search is on a grid and the observed circle is a 60-point polyline;
    # 2.5 deg of phi' and 20 % of c' (test tolerance, common practice for back-analysis).
    assert abs(result.best.friction_angle - phi_true) < 2.5
    np.testing.assert_allclose(result.best.cohesion, c_true, rtol=0.2)
    assert result.best.score < 0.05
    # The locus passes through the true pair (c' at phi_true within 1 %).
    at_true = fos_unity_locus(ObservedSlip(truth, observed), "Clay", friction_angles=[phi_true])
    np.testing.assert_allclose(at_true.cohesion[0], c_true, rtol=0.01)
    # A clearly different (shallower) surface fits the observed one worse.
    shallow = np.column_stack([x, 0.5 * y + 0.5 * np.interp(x, *np.array(GROUND).T)])
    best_fit = result.best.fits[0]
    other, _, other_distance = surface_misfit(truth, observed, shallow)
    assert other > 3 * best_fit.misfit_area
    assert other_distance > best_fit.hausdorff


#: Circles only, three searched points: enough for the record-check tests, and quick.
QUICK_SEARCH = MatchSettings(points=3, refine=0, non_circular=False)


def test_history_checks_the_searched_surfaces_not_only_the_observed_one():
    failure = layered()
    # At the stood time the water stood higher behind the crest and lower at the toe: it
    # drives cohesive pairs to failure while frictional ones gain from the lower pore pressure.
    stood_section = layered([[0.0, 19.9], [12.0, 19.8], [20.0, 13.0], [30.0, 9.5], [50.0, 9.0]])
    slip = ObservedSlip(failure, COMPOSITE)
    locus = fos_unity_locus(slip, "Weak", friction_angles=np.arange(0.0, 33.0, 3.0))
    history = history_constraints(slip, locus, [StoodCondition("stood", (stood_section,))],
                                  search=QUICK_SEARCH)
    check = history.checks[0]
    on_observed = []
    for c, phi, found in zip(locus.cohesion, locus.friction_angle, locus.found):
        if not found:
            on_observed.append(False)
            continue
        section = with_strength(stood_section, "Weak", cohesion=c, friction_angle=phi)
        fos = factor_of_safety(slice_polyline(section, COMPOSITE).slices, "spencer",
                               tolerance=1e-7, max_iterations=200).fos[0]
        on_observed.append(fos >= 1.0)
    # The observed surface alone (an independent slicing) gives the old, necessary condition.
    np.testing.assert_array_equal(check.observed_fos >= 1.0, on_observed)
    # Every surface must stand, so the searched check never keeps more points ...
    assert not (history.surviving & ~np.array(on_observed)).any()
    # ... and here it removes points at which the observed surface stood but another surface
    # fails at the stood time.
    caught = np.flatnonzero(np.array(on_observed) & ~history.surviving)
    assert caught.size > 0
    # An independent full search at the stood time with the strength of such a point (the
    # search of solver.search, run here outside the back-analysis) finds a surface below 1,
    # and it is not the observed one: its sliding mass differs from the observed one.
    i = int(caught[0])
    section = with_strength(stood_section, "Weak", cohesion=locus.cohesion[i],
                            friction_angle=locus.friction_angle[i])
    found = search_critical_surface(section, SearchSettings(method="spencer"),
                                    screen_with="bishop_simplified").critical
    assert found.fos < 1.0
    np.testing.assert_allclose(check.fos[i], found.fos, rtol=0.02)  # same search, polyline arcs
    x = np.linspace(found.scarp_x, found.toe_x, 60)
    arc = np.column_stack([x, found.centre_y - np.sqrt(found.radius**2 - (x - found.centre_x) ** 2)])
    misfit, observed_area, _ = surface_misfit(stood_section, COMPOSITE, arc)
    assert misfit > 0.25 * observed_area
    # The limit between standing and failing points is where the lowest F over the checked
    # surfaces is 1 at the stood time.
    assert history.limits
    limit = history.limits[0]
    section = with_strength(stood_section, "Weak", cohesion=limit["cohesion"],
                            friction_angle=limit["friction_angle"])
    found = search_critical_surface(section, SearchSettings(method="spencer"),
                                    screen_with="bishop_simplified").critical
    # Tolerance: the limit is found to 1e-3 deg of phi' on the re-evaluated surfaces; a fresh
    # search at the limit's own strength may find a slightly lower surface (search accuracy).
    assert 0.97 < found.fos < 1.01


def test_undrained_strength_is_proportional_for_a_purely_cohesive_base():
    # phi = 0 on every base: F = sum(Su l R) / driving moment (Bishop 1955 with tan(phi) = 0),
    # so F is proportional to Su and F = 1 at Su = Su_trial / F(Su_trial).
    section = homogeneous(10.0, 0.0)
    slip = ObservedSlip(section, COMPOSITE)
    settings = BackAnalysisSettings(method="bishop_simplified", strength_tolerance=1e-9)
    locus = fos_unity_locus(slip, "Clay", "undrained", settings=settings)
    trial = fos_with_strength(slip, "Clay", undrained_strength=30.0, settings=settings).fos[0]
    np.testing.assert_allclose(locus.undrained_strength[0], 30.0 / trial, rtol=1e-7)


def test_friction_form_solves_phi_with_zero_cohesion():
    slip = ObservedSlip(layered(), COMPOSITE)
    locus = fos_unity_locus(slip, "Weak", "friction")
    assert locus.found[0] and locus.cohesion[0] == 0.0
    fos = fos_with_strength(slip, "Weak", cohesion=0.0,
                            friction_angle=locus.friction_angle[0]).fos[0]
    np.testing.assert_allclose(fos, 1.0, rtol=1e-5)


def test_joint_locus_lies_between_the_sections_own_loci():
    # Mean F = 1 with each F rising in c': the joint root lies between the sections' roots.
    wet = layered([[0.0, 19.8], [12.0, 19.0], [30.0, 11.5], [50.0, 10.0]])
    slips = [ObservedSlip(layered(), COMPOSITE, "A"), ObservedSlip(wet, COMPOSITE, "B")]
    locus = fos_unity_locus(slips, "Weak", friction_angles=[10.0, 20.0])
    own_a, own_b = locus.by_section["A"], locus.by_section["B"]
    assert np.all(own_a < own_b)
    assert np.all((locus.cohesion > own_a) & (locus.cohesion < own_b))


def test_higher_water_needs_more_cohesion():
    slip = ObservedSlip(layered(), COMPOSITE)
    locus = fos_unity_locus(slip, "Weak", friction_angles=[10.0, 20.0])
    cases = {c.label: c for c in sensitivity(slip, locus, water_change=0.5,
                                             unit_weight_change=None)}
    assert cases["water lines +0.50 m"].shift > 0
    assert cases["water lines -0.50 m"].shift < 0


# --- bad cases ------------------------------------------------------------------------------


def test_surface_above_the_ground_is_rejected():
    above = [[5.0, 21.0], [20.0, 18.0], [45.0, 11.0]]
    with pytest.raises(ObservedSurfaceError, match="not admissible for section 'L'"):
        fos_unity_locus(ObservedSlip(layered(), above), "Weak", friction_angles=[20.0])


def test_surface_ending_below_the_ground_is_rejected_naming_the_end_and_its_x():
    buried = [[12.0, 15.0], [20.0, 9.5], [33.0, 10.0]]
    # Ground at x = 12 m: 20 - (12 - 10) / 2 = 19 m, so the upper end is 4 m below it.
    with pytest.raises(ObservedSurfaceError, match=r"its upper end \(scarp\) \[12, 15\] is "
                       r"4.000 m below the ground at x = 12 m"):
        ObservedSlip(layered(), buried)
    toe_buried = [[8.0, 20.0], [20.0, 9.5], [33.0, 9.9]]
    with pytest.raises(ObservedSurfaceError, match=r"its lower end \(toe\) \[33, 9.9\] is "
                       r"0.100 m below the ground at x = 33 m"):
        ObservedSlip(layered(), toe_buried)
    with pytest.raises(ObservedSurfaceError, match=r"its lower end \(toe\) \[55, 10\] lies off "
                       r"section 'L' \(x = 0 to 50 m\)"):
        ObservedSlip(layered(), [[8.0, 20.0], [20.0, 9.5], [55.0, 10.0]])


def test_surveyed_ends_within_a_centimetre_of_the_ground_are_taken_onto_it():
    # An end 0.5 mm below the ground (survey and drawing round-off) is moved onto the ground,
    # so the slip is analysed as surveyed; 2 cm is more than BACKCALC_SURVEY_SNAP = 0.01 m.
    rounded = np.array(COMPOSITE)
    rounded[0, 1] -= 0.0005
    rounded[-1, 1] += 0.0004
    slip = ObservedSlip(layered(), rounded)
    np.testing.assert_array_equal(slip.surface, np.array(COMPOSITE))
    exact = fos_unity_locus(ObservedSlip(layered(), COMPOSITE), "Weak", friction_angles=[20.0])
    snapped = fos_unity_locus(slip, "Weak", friction_angles=[20.0])
    np.testing.assert_allclose(snapped.cohesion, exact.cohesion, rtol=1e-12)
    deeper = np.array(COMPOSITE)
    deeper[0, 1] -= 0.02
    with pytest.raises(ObservedSurfaceError, match="0.020 m below the ground at x = 8 m"):
        ObservedSlip(layered(), deeper)


def test_surface_missing_the_material_is_rejected():
    shallow = [[9.0, 20.0], [15.0, 16.0], [25.0, 12.0], [31.0, 10.0]]
    with pytest.raises(ObservedSurfaceError, match="does not pass through material 'Weak'"):
        fos_unity_locus(ObservedSlip(layered(), shallow), "Weak", friction_angles=[20.0])


def test_no_root_in_the_range_reports_fos_at_both_ends():
    settings = BackAnalysisSettings(cohesion_range=(0.0, 0.5))
    with pytest.raises(NoSolutionError, match=r"F at c' \[kPa\] = 0: .* at c' \[kPa\] = 0.5"):
        fos_unity_locus(ObservedSlip(layered(), COMPOSITE), "Weak", friction_angles=[0.0, 2.0],
                        settings=settings)


def test_unknown_form_and_bad_settings_are_named():
    slip = ObservedSlip(layered(), COMPOSITE)
    with pytest.raises(ValueError, match="unknown form 'peak'"):
        fos_unity_locus(slip, "Weak", "peak")
    with pytest.raises(ValueError, match="cohesion_range = \\(5.0, 1.0\\)"):
        BackAnalysisSettings(cohesion_range=(5.0, 1.0))
    with pytest.raises(ValueError, match="needs friction_angles"):
        fos_unity_locus(slip, "Weak")


# --- a long planar slip against the infinite slope; sections weighted by length -------------

#: A long uniform slope at BETA (1500 m of face), dry, in one c'-phi' soil (synthetic).
BETA, FACE, GAMMA = 20.0, 1500.0, 19.0
PLANAR_TOP = FACE * np.tan(np.radians(BETA))
PLANAR_GROUND = [[0.0, PLANAR_TOP], [20.0, PLANAR_TOP], [20.0 + FACE, 0.0], [40.0 + FACE, 0.0]]


def planar_slope():
    return section_from_dict({
        "section": {"id": "P"},
        "ground": {"points": PLANAR_GROUND},
        "material": [{"name": "Clay", "unit_weight": GAMMA, "cohesion": 5.0,
                      "friction_angle": 20.0, "water": "none"}],
        "stratum": [{"material": "Clay"}],
    })


def planar_slip(depth):
    """A slip plane parallel to the face at vertical depth ``depth`` [m], rising at 45 deg to
    the ground at the scarp and at the toe."""
    ground = np.array(PLANAR_GROUND)
    x1, x2 = 20.0 + 2 * depth, 20.0 + FACE - 2 * depth
    x = np.linspace(x1, x2, 50)
    ends = np.array([x1 - depth, x2 + depth])
    return np.vstack([[[ends[0], np.interp(ends[0], *ground.T)]],
                      np.column_stack([x, np.interp(x, *ground.T) - depth]),
                      [[ends[1], np.interp(ends[1], *ground.T)]]])


def infinite_slope_cohesion(depth, friction_angle):
    """c' at F = 1 on a dry infinite slope: from F = (c' + gamma z cos^2(beta) tan(phi')) /
    (gamma z sin(beta) cos(beta)) (Skempton and DeLory 1957; Duncan, Wright and Brandon 2014,
    ch. 6), c' = gamma z cos^2(beta) (tan(beta) - tan(phi'))."""
    beta, phi = np.radians(BETA), np.radians(friction_angle)
    return GAMMA * depth * np.cos(beta) ** 2 * (np.tan(beta) - np.tan(phi))


@pytest.mark.parametrize("method", ["spencer", "bishop_simplified", "morgenstern_price"])
def test_locus_of_a_long_planar_slip_is_the_infinite_slope_closed_form(method):
    phis = np.array([0.0, 5.0, 10.0, 15.0])
    locus = fos_unity_locus(ObservedSlip(planar_slope(), planar_slip(2.0)), "Clay",
                            friction_angles=phis, settings=BackAnalysisSettings(method=method))
    # Skempton and DeLory (1957), closed form above. Tolerance 2 % (as for the methods
    # against the infinite slope in tests/solver/test_infinite_slope.py): the scarp and toe
    # of a real slip add resistance over about 6 m of its 1600 m, which lowers c' by < 1 %.
    np.testing.assert_allclose(locus.cohesion, infinite_slope_cohesion(2.0, phis), rtol=0.02)


def test_sections_are_weighted_by_the_length_of_slope_they_represent():
    section = planar_slope()
    shallow, deep = planar_slip(2.0), planar_slip(4.0)
    slips = [ObservedSlip(section, shallow, "A", length=30.0),
             ObservedSlip(section, deep, "B", length=10.0)]
    locus = fos_unity_locus(slips, "Clay", friction_angles=[0.0])
    # With phi' = 0 everywhere F is proportional to c' (F is a strength reduction factor:
    # scaling c' by k scales F by k), so F_k(c') = c' / c_k with c_k the section's own root,
    # and sum w_k F_k = 1 gives the length-weighted harmonic mean c' = 1 / sum(w_k / c_k),
    # w = (30, 10) / 40. Exact up to the root tolerance.
    own_a, own_b = locus.by_section["A"][0], locus.by_section["B"][0]
    np.testing.assert_allclose(locus.cohesion[0], 1.0 / (0.75 / own_a + 0.25 / own_b), rtol=1e-6)
    # By hand from the closed form (Skempton and DeLory 1957): c_A = 19 x 2 x sin 20 cos 20
    # = 12.21 kPa, c_B = 24.43 kPa, so c' = 1 / (0.75 / 12.21 + 0.25 / 24.43) = 13.96 kPa
    # (unweighted: 16.28 kPa). Tolerance 2 % as above.
    np.testing.assert_allclose(locus.cohesion[0], 13.96, rtol=0.02)
    # Equal lengths weigh as no lengths at all (the unweighted mean).
    equal = fos_unity_locus([ObservedSlip(section, shallow, "A", length=5.0),
                             ObservedSlip(section, deep, "B", length=5.0)], "Clay",
                            friction_angles=[0.0])
    unweighted = fos_unity_locus([ObservedSlip(section, shallow, "A"),
                                  ObservedSlip(section, deep, "B")], "Clay",
                                 friction_angles=[0.0])
    np.testing.assert_allclose(equal.cohesion, unweighted.cohesion, rtol=1e-9)
    np.testing.assert_allclose(unweighted.cohesion[0], 16.28, rtol=0.02)


def test_lengths_must_be_given_for_every_section_or_none():
    section = planar_slope()
    with pytest.raises(ValueError, match="given for 1 of 2 sections"):
        fos_unity_locus([ObservedSlip(section, planar_slip(2.0), "A", length=30.0),
                         ObservedSlip(section, planar_slip(4.0), "B")], "Clay",
                        friction_angles=[0.0])
    with pytest.raises(ValueError, match="length = -3 m"):
        ObservedSlip(section, planar_slip(2.0), "A", length=-3)


def test_a_best_fit_that_fails_a_stood_time_is_flagged_inconsistent():
    # A stood time wetter than the failure everywhere: on a fixed surface F falls as the pore
    # pressure rises (the effective normal force falls; Duncan, Wright and Brandon 2014,
    # ch. 6), and F = 1 on the observed surface at failure, so no strength on the locus can
    # have stood then. The result must say so as data, not only in a note.
    wetter = layered([[x, y + 0.4] for x, y in WET])
    slip = ObservedSlip(layered(), COMPOSITE)
    result = back_analyse(slip, "Weak", friction_angles=[10.0, 20.0, 30.0],
                          stood=[StoodCondition("wetter", (wetter,))],
                          match=MatchSettings(points=2, refine=0, non_circular=False),
                          water_change=None, unit_weight_change=None)
    checks = {c.name: c for c in result.consistency}
    assert set(checks) == {"observed surface at failure", "critical surface at failure", "wetter"}
    assert checks["observed surface at failure"].passed  # one section: F = 1 by the locus
    assert checks["observed surface at failure"].value < 1e-5
    assert not checks["wetter"].passed and checks["wetter"].value < 1.0
    assert result.consistent is False
    assert not result.history.surviving.any()
    np.testing.assert_array_less(result.history.checks[0].observed_fos[result.locus.found], 1.0)
