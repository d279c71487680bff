"""Planar wedges through the toe: Janbu's force equilibrium against the closed form, and
Culmann's critical height."""

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from solver.methods import janbu_simplified
from tests.solver.slice_fixtures import wedge_slices

HEIGHT, SLOPE, GAMMA, COHESION, PHI = 8.0, 60.0, 18.0, 12.0, 25.0


def _closed_form(slices, plane_angle, cohesion, friction_angle):
    # Planar sliding block: F = (c L + W cos(theta) tan(phi)) / (W sin(theta)), with
    # N = W cos(theta), i.e. force equilibrium of a rigid wedge (Culmann 1866, as given in
    # Knappett and Craig 2012, Craig's Soil Mechanics, 8th ed., ch. 12).
    theta = np.radians(plane_angle)
    weight = slices.weight.sum(axis=1)
    length = slices.width.sum(axis=1) / np.cos(theta)
    return (cohesion * length + weight * np.cos(theta) * np.tan(np.radians(friction_angle))) / (
        weight * np.sin(theta)
    )


def test_janbu_uncorrected_on_planar_wedges_equals_the_closed_form():
    angles = np.array([30.0, 35.0, 40.0, 45.0, 50.0])
    slices = wedge_slices(HEIGHT, SLOPE, angles, GAMMA, COHESION, PHI)
    result = janbu_simplified(slices, correction=False, tolerance=1e-13, max_iterations=500)
    assert result.converged.all(), result.message
    # Exact: on one plane Janbu's force equilibrium with X = 0 is the wedge equation.
    np.testing.assert_allclose(
        result.fos, _closed_form(slices, angles, COHESION, PHI), rtol=1e-9
    )


def test_janbu_correction_is_one_on_a_plane():
    # Janbu (1973): f0 = 1 + b1 (d/L - 1.4 (d/L)^2) = 1 for d = 0 (a planar surface).
    slices = wedge_slices(HEIGHT, SLOPE, [40.0], GAMMA, COHESION, PHI)
    corrected = janbu_simplified(slices, tolerance=1e-12)
    uncorrected = janbu_simplified(slices, correction=False, tolerance=1e-12)
    np.testing.assert_allclose(corrected.fos, uncorrected.fos, rtol=1e-12)


@pytest.mark.parametrize(
    "slope_angle, friction_angle, cohesion, unit_weight",
    [(60.0, 25.0, 12.0, 18.0), (75.0, 30.0, 20.0, 19.0), (50.0, 15.0, 8.0, 17.0)],
)
def test_culmann_critical_height_gives_minimum_fos_of_one(
    slope_angle, friction_angle, cohesion, unit_weight
):
    # Culmann (1866), as in Knappett and Craig (2012), ch. 12: planes through the toe of a
    # slope of height Hc = 4 c sin(beta) cos(phi) / (gamma (1 - cos(beta - phi))) have
    # min F = 1, on the plane theta = (beta + phi) / 2.
    beta, phi = np.radians(slope_angle), np.radians(friction_angle)
    critical_height = 4 * cohesion * np.sin(beta) * np.cos(phi) / (
        unit_weight * (1 - np.cos(beta - phi))
    )

    def fos(angle):
        slices = wedge_slices(
            critical_height, slope_angle, [angle], unit_weight, cohesion, friction_angle
        )
        result = janbu_simplified(slices, correction=False, tolerance=1e-13, max_iterations=500)
        assert result.converged[0], result.message
        return result.fos[0]

    # A coarse vectorised scan brackets the minimum, then a bounded 1-D minimisation.
    angles = np.linspace(friction_angle + 1.0, slope_angle - 1.0, 60)
    scan = janbu_simplified(
        wedge_slices(critical_height, slope_angle, angles, unit_weight, cohesion, friction_angle),
        correction=False, tolerance=1e-12, max_iterations=500,
    ).fos
    best = int(np.argmin(scan))
    lower, upper = angles[max(best - 1, 0)], angles[min(best + 1, angles.size - 1)]
    found = minimize_scalar(fos, bounds=(lower, upper), method="bounded",
                            options={"xatol": 1e-7})
    assert found.fun == pytest.approx(1.0, rel=1e-7)
    assert found.x == pytest.approx(0.5 * (slope_angle + friction_angle), abs=1e-2)
