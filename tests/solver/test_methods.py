"""Limit-equilibrium methods of slices (solver.methods) on hand-built slice tables."""

import dataclasses

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from solver.constants import GAMMA_W
from solver.errors import MethodError
from solver.methods import (
    JANBU_B1,
    METHOD_NAMES,
    bishop_simplified,
    factor_of_safety,
    janbu_correction_factor,
    janbu_simplified,
    morgenstern_price,
    ordinary,
    spencer,
)
from tests.solver.slice_fixtures import (
    circle_slices,
    concatenate,
    infinite_slope_slices,
    make_slices,
    pad,
    polyline_slices,
    simple_slope_ground,
)

TIGHT = dict(tolerance=1e-11, max_iterations=500)

# A 2:1 slope 10 m high (invented for the tests) and three circles through it.
GROUND, TOE_X = simple_slope_ground(10.0, np.degrees(np.arctan(0.5)))
CIRCLES = [[5.0, 18.0, 19.0], [10.0, 15.0, 17.0], [8.0, 20.0, 21.0]]


def _circles(ru=0.0, cohesion=10.0, friction_angle=30.0, **kwargs):
    return circle_slices(GROUND, CIRCLES, 20.0, cohesion, friction_angle, ru=ru, **kwargs)


def _options(method):
    return {} if method == "ordinary" else TIGHT


def _loaded_circles():
    """Circles with pore pressure, a strip surcharge, kh and water in a tension crack."""
    slices = _circles(ru=0.25, surcharge_pressure=15.0, surcharge_from=-6.0, surcharge_to=-1.0)
    depth = 1.5
    return dataclasses.replace(
        slices,
        kh=0.1,
        crack_water_force=np.full(slices.n_surfaces, 0.5 * GAMMA_W * depth**2),
        crack_water_y=np.full(slices.n_surfaces, 10.0 - depth + depth / 3.0),
    )


def _loaded_polyline():
    slices = polyline_slices(
        GROUND, [[-4.0, 10.0], [4.0, 3.0], [16.0, -1.5], [25.0, 0.0]], 20.0, 8.0, 28.0, ru=0.2
    )
    return dataclasses.replace(
        slices, kh=0.1, crack_water_force=np.array([5.0]), crack_water_y=np.array([9.0])
    )


# ------------------------------------------------------------------------------------------
# Janbu's correction factor


@pytest.mark.parametrize("ratio", [0.0, 0.05, 0.1, 0.2, 0.3])
@pytest.mark.parametrize("b1", [0.69, 0.31, 0.50])
def test_janbu_correction_factor_formula(ratio, b1):
    # Janbu (1973): f0 = 1 + b1 (d/L - 1.4 (d/L)^2).
    expected = 1.0 + b1 * (ratio - 1.4 * ratio**2)
    assert janbu_correction_factor(ratio * 40.0, 40.0, b1) == pytest.approx(expected, rel=1e-12)


def test_janbu_correction_factor_is_held_beyond_the_chart():
    # Janbu's (1973) chart ends at d/L = 0.4 (from memory of the chart); beyond it f0 keeps
    # its value there (common practice) instead of following the parabola down again.
    # Hand values: 1 + b1 (0.4 - 1.4 * 0.16) = 1 + 0.176 b1.
    for b1 in JANBU_B1.values():
        at_end = janbu_correction_factor(0.4, 1.0, b1)
        assert at_end == pytest.approx(1.0 + 0.176 * b1, rel=1e-12)
        assert janbu_correction_factor(0.7, 1.0, b1) == at_end
    np.testing.assert_allclose(
        janbu_correction_factor(np.array([0.2, 0.5]), 1.0, 0.5), [1.072, 1.088], rtol=1e-12)


def test_janbu_simplified_says_when_f0_is_held():
    # A deep circular arc under a ground falling towards +x: d/L of its sagitta is beyond
    # the chart (Janbu 1973). Invented numbers.
    x_mid = np.linspace(-9.5, 9.5, 20)
    y_base = 10.0 - np.sqrt(100.0 - x_mid**2)
    y_top = 12.0 - 0.2 * (x_mid + 10.0)
    slices = make_slices(
        x_left=x_mid - 0.5, x_right=x_mid + 0.5, alpha=np.arcsin(-x_mid / 10.0), y_base=y_base,
        y_top=y_top, weight=20.0 * (y_top - y_base), cohesion=20.0, tan_phi=0.0,
        centre_x=0.0, centre_y=10.0, radius=10.0, moment_x=0.0, moment_y=10.0,
    )
    corrected = janbu_simplified(slices, **TIGHT)
    plain = janbu_simplified(slices, correction=False, **TIGHT)
    assert corrected.converged[0], corrected.message
    assert corrected.beyond_correction_chart[0] and not plain.beyond_correction_chart[0]
    assert "beyond Janbu's correction chart" in corrected.message[0]
    assert corrected.fos[0] == pytest.approx(
        plain.fos[0] * (1.0 + 0.176 * JANBU_B1["cohesion_only"]), rel=1e-12)


def test_janbu_correction_factor_values_and_arrays():
    # Janbu (1973): b1 = 0.69 (c only), 0.31 (phi only), 0.50 (c and phi); worked by hand for
    # d/L = 0.1: f0 = 1 + b1 * 0.086.
    assert JANBU_B1 == {
        "cohesion_only": 0.69, "friction_only": 0.31, "cohesion_and_friction": 0.50,
    }
    np.testing.assert_allclose(
        janbu_correction_factor(np.array([2.0, 2.0, 2.0]), 20.0, np.array([0.69, 0.31, 0.50])),
        [1.05934, 1.02666, 1.043],
        rtol=1e-12,
    )


@pytest.mark.parametrize(
    "cohesion, friction_angle, b1",
    [(10.0, 0.0, 0.69), (0.0, 30.0, 0.31), (10.0, 30.0, 0.50)],
)
def test_janbu_simplified_applies_f0_with_the_b1_of_the_soil(cohesion, friction_angle, b1):
    # Janbu (1973): F = f0 F0, d the depth of the circular arc below its chord (the sagitta),
    # L the chord. Slices measure d at base mid-points, hence rtol 1e-3.
    slices = circle_slices(GROUND, [CIRCLES[0]], 20.0, cohesion, friction_angle)
    corrected = janbu_simplified(slices, **TIGHT)
    uncorrected = janbu_simplified(slices, correction=False, **TIGHT)
    x0, x1 = slices.x_left[0, 0], slices.x_right[0, -1]
    xc, yc, radius = CIRCLES[0]
    y0 = yc - np.sqrt(radius**2 - (x0 - xc) ** 2)
    y1 = yc - np.sqrt(radius**2 - (x1 - xc) ** 2)
    chord = np.hypot(x1 - x0, y1 - y0)
    sagitta = radius - np.sqrt(radius**2 - (chord / 2) ** 2)
    f0 = 1 + b1 * (sagitta / chord - 1.4 * (sagitta / chord) ** 2)
    assert corrected.fos[0] / uncorrected.fos[0] == pytest.approx(f0, rel=1e-3)


# ------------------------------------------------------------------------------------------
# Equilibrium of the per-slice table (an independent check of the solver)


def _assert_below(values, bound):
    values, bound = np.broadcast_arrays(values, bound)
    assert np.all(values < bound), np.max(values / bound)


def _equilibrium_residuals(slices, result):
    """Force and moment sums of all external forces on each sliding mass, from the per-slice
    table of the result: W and Q at the slice mid-point, kh W at y_weight, P_w at
    crack_water_y, N = N' + u l and S on the base mid-point."""
    length = slices.base_length
    normal = result.normal_force + slices.pore_pressure * length
    shear = result.shear_force
    sin_a, cos_a = np.sin(slices.alpha), np.cos(slices.alpha)
    fx = slices.kh * slices.weight + normal * sin_a - shear * cos_a
    fy = normal * cos_a + shear * sin_a - slices.weight - slices.surcharge
    horizontal = fx.sum(axis=1) + slices.crack_water_force
    vertical = fy.sum(axis=1)
    # Moments about an arbitrary point (here the origin), counter-clockwise positive.
    x = slices.x_mid
    moment = (
        x * (normal * cos_a + shear * sin_a)
        - slices.y_base * (normal * sin_a - shear * cos_a)
        - x * (slices.weight + slices.surcharge)
        - slices.y_weight * slices.kh * slices.weight
    ).sum(axis=1) - slices.crack_water_y * slices.crack_water_force
    return horizontal, vertical, moment


@pytest.mark.parametrize("method, options", [
    ("spencer", {}),
    ("morgenstern_price", {"interslice": "half_sine"}),
    ("morgenstern_price", {"interslice": "constant"}),
])
@pytest.mark.parametrize("make", [_loaded_circles, _loaded_polyline])
def test_rigorous_methods_satisfy_force_and_moment_equilibrium(method, options, make):
    # Spencer (1967); Morgenstern and Price (1965): every slice in force equilibrium and the
    # mass in moment equilibrium; checked to 1e-6 of the total weight (issue requirement).
    slices = make()
    result = factor_of_safety(slices, method, **options, **TIGHT)
    assert result.converged.all(), result.message
    weight = slices.weight.sum(axis=1)
    size = slices.x_right.max(axis=1) - slices.x_left.min(axis=1)
    horizontal, vertical, moment = _equilibrium_residuals(slices, result)
    _assert_below(np.abs(horizontal), 1e-6 * weight)
    _assert_below(np.abs(vertical), 1e-6 * weight)
    _assert_below(np.abs(moment), 1e-6 * weight * size)


@pytest.mark.parametrize("interslice_force", ["total", "effective"])
@pytest.mark.parametrize("method", ["spencer", "morgenstern_price"])
def test_interslice_forces_balance_every_slice(method, interslice_force):
    # Each slice: -(E_{i+1} - E_i) + kh W + P_w + N sin a - S cos a = 0 and
    # (X_{i+1} - X_i) - W - Q + N cos a + S sin a = 0, with E_0 = E_n = 0, X_0 = X_n = 0 and
    # X = lambda f E on the total interslice force E (Morgenstern and Price 1965; Spencer
    # 1967), or, as the option, on the effective one E' = E - U.
    slices = _loaded_circles()
    result = factor_of_safety(slices, method, interslice_force=interslice_force, **TIGHT)
    e, x = result.interslice_normal, result.interslice_shear
    normal = result.normal_force + slices.pore_pressure * slices.base_length
    sin_a, cos_a = np.sin(slices.alpha), np.cos(slices.alpha)
    crack = np.zeros_like(slices.weight)
    crack[:, 0] = slices.crack_water_force
    horizontal = -(e[:, 1:] - e[:, :-1]) + slices.kh * slices.weight + crack + (
        normal * sin_a - result.shear_force * cos_a
    )
    vertical = (x[:, 1:] - x[:, :-1]) - slices.weight - slices.surcharge + (
        normal * cos_a + result.shear_force * sin_a
    )
    weight = slices.weight.sum(axis=1, keepdims=True)
    _assert_below(np.abs(horizontal), 1e-6 * weight)
    _assert_below(np.abs(vertical), 1e-6 * weight)
    _assert_below(np.abs(e[:, [0, -1]]), 1e-6 * weight)
    if method == "spencer":
        inclined = e - result.interslice_water if interslice_force == "effective" else e
        assert np.any(result.interslice_water > 0)  # the two forms differ on these circles
        np.testing.assert_allclose(x, result.lambda_[:, None] * inclined, rtol=1e-12,
                                   atol=1e-12)


def test_line_of_thrust_lies_inside_the_mass_on_plain_circles():
    result = spencer(_circles(), **TIGHT)
    assert result.admissible.all(), result.message
    assert not result.thrust_outside.any()
    assert np.isfinite(result.thrust_line_y[:, 5:-5]).all()


def test_morgenstern_price_constant_function_equals_spencer():
    # Morgenstern and Price (1965) with f(x) = 1 is Spencer's method (Spencer 1967).
    for slices in (_loaded_circles(), _loaded_polyline()):
        a = spencer(slices, **TIGHT)
        b = morgenstern_price(slices, interslice="constant", **TIGHT)
        np.testing.assert_allclose(b.fos, a.fos, rtol=1e-6)
        np.testing.assert_allclose(b.lambda_, a.lambda_, rtol=1e-6)


def test_bishop_satisfies_moment_and_vertical_equilibrium():
    # Bishop (1955): vertical equilibrium of each slice (X = 0) and moment equilibrium about
    # the centre; horizontal equilibrium is not enforced, so it is not checked.
    slices = _loaded_circles()
    result = bishop_simplified(slices, **TIGHT)
    _, vertical, _ = _equilibrium_residuals(slices, result)
    weight = slices.weight.sum(axis=1)
    _assert_below(np.abs(vertical), 1e-6 * weight)
    # Moment about the centre: sum(S R) equals the driving moment.
    xc, yc = slices.centre_x[:, None], slices.centre_y[:, None]
    normal = result.normal_force + slices.pore_pressure * slices.base_length
    sin_a, cos_a = np.sin(slices.alpha), np.cos(slices.alpha)
    dx, dy = slices.x_mid - xc, slices.y_base - yc
    moment = (
        dx * (normal * cos_a + result.shear_force * sin_a)
        - dy * (normal * sin_a - result.shear_force * cos_a)
        - dx * (slices.weight + slices.surcharge)
        - (slices.y_weight - yc) * slices.kh * slices.weight
    ).sum(axis=1) - (slices.crack_water_y - yc[:, 0]) * slices.crack_water_force
    _assert_below(np.abs(moment), 1e-6 * weight * slices.radius)


def test_bishop_equals_the_textbook_formula_on_circles():
    # Bishop (1955): F = sum[(c b + (W - u b) tan phi) / m_alpha] / sum(W sin alpha).
    slices = _circles(ru=0.3)
    fos = bishop_simplified(slices, **TIGHT).fos
    b, w, a = slices.width, slices.weight, slices.alpha
    m_alpha = np.cos(a) * (1 + np.tan(a) * slices.tan_phi / fos[:, None])
    numerator = (slices.cohesion * b + (w - slices.pore_pressure * b) * slices.tan_phi) / m_alpha
    np.testing.assert_allclose(
        fos, numerator.sum(axis=1) / (w * np.sin(a)).sum(axis=1), rtol=1e-9
    )


def test_ordinary_equals_the_textbook_formula_on_circles():
    # Fellenius (1936): F = sum[c l + (W cos alpha - u l) tan phi] / sum(W sin alpha), the
    # conventional form (no water forces on the slice sides).
    slices = _circles(ru=0.3)
    fos = ordinary(slices, side_water=False).fos
    l, w, a = slices.base_length, slices.weight, slices.alpha
    expected = (
        slices.cohesion * l + (w * np.cos(a) - slices.pore_pressure * l) * slices.tan_phi
    ).sum(axis=1) / (w * np.sin(a)).sum(axis=1)
    np.testing.assert_allclose(fos, expected, rtol=1e-12)


# ------------------------------------------------------------------------------------------
# Comparisons between methods on circles


def test_bishop_close_to_spencer_on_dry_circles_and_ordinary_lower():
    # Fredlund and Krahn (1977): on circles Bishop's simplified method is within about 1% of
    # the rigorous methods; the ordinary method is lower.
    slices = _circles()
    bishop = bishop_simplified(slices, **TIGHT).fos
    rigorous = spencer(slices, **TIGHT).fos
    np.testing.assert_allclose(bishop, rigorous, rtol=0.01)
    assert np.all(ordinary(slices).fos < bishop)


def test_ordinary_falls_further_behind_as_pore_pressure_rises():
    # Whitman and Bailey (1967); Fredlund and Krahn (1977): the error of the conventional
    # ordinary method (no water forces on the slice sides) grows with pore pressure.
    gaps = []
    for ru in (0.0, 0.2, 0.4):
        slices = _circles(ru=ru)
        bishop = bishop_simplified(slices, **TIGHT).fos
        gaps.append((bishop - ordinary(slices, side_water=False).fos) / bishop)
    gaps = np.array(gaps)
    assert np.all(gaps > 0)
    assert np.all(np.diff(gaps, axis=0) > 0)


# ------------------------------------------------------------------------------------------
# Strength reduction invariant


@settings(max_examples=25, deadline=None)
@given(
    cohesion=st.floats(2.0, 30.0),
    friction_angle=st.floats(10.0, 40.0),
    ru=st.floats(0.0, 0.3),
    factor=st.floats(0.5, 2.0),
)
def test_scaling_strength_scales_fos_for_every_method(cohesion, friction_angle, ru, factor):
    # F is a strength reduction factor: S = (c' l + N' tan phi') / F in every method, so
    # c' -> k c', tan phi' -> k tan phi' gives F -> k F (e.g. Duncan, Wright and Brandon 2014,
    # ch. 6 definition of F).
    base = circle_slices(GROUND, [CIRCLES[1]], 20.0, cohesion, friction_angle, ru=ru)
    scaled = dataclasses.replace(
        base, cohesion=base.cohesion * factor, tan_phi=base.tan_phi * factor
    )
    for method in METHOD_NAMES:
        plain = factor_of_safety(base, method, **_options(method))
        stronger = factor_of_safety(scaled, method, **_options(method))
        assert plain.converged[0] and stronger.converged[0], method
        assert stronger.fos[0] == pytest.approx(factor * plain.fos[0], rel=1e-7), method


# ------------------------------------------------------------------------------------------
# Padding, batches, result access


@pytest.mark.parametrize("method", METHOD_NAMES)
def test_padding_slices_change_nothing(method):
    slices = _loaded_circles()
    plain = factor_of_safety(slices, method, **_options(method))
    padded = factor_of_safety(pad(slices, leading=2, trailing=4), method, **_options(method))
    np.testing.assert_allclose(padded.fos, plain.fos, rtol=1e-9)
    np.testing.assert_allclose(padded.lambda_, plain.lambda_, rtol=1e-7, atol=1e-12)
    np.testing.assert_allclose(padded.normal_force[:, 2:-4], plain.normal_force, rtol=1e-7,
                               atol=1e-9)
    assert padded.message == plain.message


@pytest.mark.parametrize("method", METHOD_NAMES)
def test_batch_of_different_surfaces_equals_each_alone(method):
    circles = _loaded_circles()
    polyline = _loaded_polyline()
    # Bring both to the same slice count with padding, then solve them together.
    extra = polyline.n_slices - circles.n_slices
    batch = concatenate(
        pad(circles, trailing=max(extra, 0)), pad(polyline, trailing=max(-extra, 0))
    )
    together = factor_of_safety(batch, method, **_options(method))
    alone = np.concatenate([
        factor_of_safety(circles, method, **_options(method)).fos,
        factor_of_safety(polyline, method, **_options(method)).fos,
    ])
    np.testing.assert_allclose(together.fos, alone, rtol=1e-9)


def test_surface_without_active_slices_gives_nan_and_a_message():
    slices = _circles()
    empty = dataclasses.replace(slices, active=np.zeros_like(slices.active))
    for method in METHOD_NAMES:
        result = factor_of_safety(concatenate(slices, empty), method)
        assert np.all(np.isnan(result.fos[3:])), method
        assert result.message[3:] == ("no active slice",) * 3, method
        assert not result.converged[3:].any() and not result.admissible[3:].any()
        assert np.isfinite(result.fos[:3]).all()


def test_surface_returns_active_slices_only():
    result = spencer(pad(_circles(), leading=1, trailing=2))
    one = result.surface(1)
    assert one.fos == result.fos[1]
    assert one.normal_force.shape == (40,)
    assert one.interslice_normal.shape == (41,)
    assert one.interslice_normal[0] == 0.0
    assert one.method == "spencer"


def test_moment_methods_need_a_moment_centre():
    slices = dataclasses.replace(_loaded_polyline(), moment_x=np.array([np.nan]),
                                 moment_y=np.array([np.nan]))
    for method in ("ordinary", "bishop_simplified"):
        result = factor_of_safety(slices, method)
        assert np.isnan(result.fos[0])
        assert "no moment centre" in result.message[0]


# ------------------------------------------------------------------------------------------
# Flags


def test_low_m_alpha_is_flagged():
    # Four slices of a circle (centre (0, 10), R = 10) with a heavy upper slice and a steep
    # exit (alpha = -46.5 deg): Bishop converges at F = 0.78 where m_alpha of the exit slice is
    # 0.15 < M_ALPHA_MIN (Whitman and Bailey 1967 criterion, as restated by Duncan, Wright and
    # Brandon 2014). Invented numbers, hand-tuned to reach the flag.
    x_left, x_right = np.array([-9.5, -5.0, 0.0, 5.0]), np.array([-5.0, 0.0, 5.0, 9.5])
    x_mid = 0.5 * (x_left + x_right)
    y_base = 10.0 - np.sqrt(100.0 - x_mid**2)
    slices = make_slices(
        x_left=x_left, x_right=x_right, alpha=np.arcsin(-x_mid / 10.0), y_base=y_base,
        y_top=y_base + 3.0, weight=[1500.0, 200.0, 40.0, 10.0], cohesion=0.0,
        tan_phi=np.tan(np.radians(30.0)), centre_x=0.0, centre_y=10.0, radius=10.0,
        moment_x=0.0, moment_y=10.0,
    )
    for method in ("bishop_simplified", "janbu_simplified"):
        result = factor_of_safety(slices, method)
        assert result.converged[0], method
        assert not result.admissible[0], method
        assert result.low_m_alpha[0] and result.surface(0).low_m_alpha, method
        assert "<= M_ALPHA_MIN=0.2" in result.message[0], method


@pytest.mark.parametrize("ru", [0.0, 0.35])
def test_steep_exit_converges_on_the_physical_branch(ru):
    # A very steep exit (-59 deg) of a kinked polyline. Roots of Bishop's equation exist below
    # F* = max(-tan(alpha) tan(phi')), where some m_alpha < 0 (an unphysical branch; Whitman
    # and Bailey 1967). The iteration must converge above F*, i.e. with every m_alpha > 0.
    slices = polyline_slices(
        GROUND, [[-3.0, 10.0], [14.0, -5.0], [17.0, 0.0]], 20.0, 0.0, 38.0, ru=ru
    )
    result = bishop_simplified(slices, **TIGHT)
    floor = np.max(-np.tan(slices.alpha) * slices.tan_phi)
    assert result.converged[0], result.message
    assert result.fos[0] > floor
    assert np.all(result.m_alpha[0] > 0)


def test_negative_effective_normal_force_is_flagged():
    # Pore pressure above the overburden (ru = 0.9) on a frictional base.
    slices = _circles(ru=0.9)
    result = ordinary(slices)
    assert not result.admissible.any()
    assert result.negative_normal.all() and not result.low_m_alpha.any()
    assert all("negative effective normal force" in m for m in result.message)


def test_non_converged_fos_is_nan_and_the_last_iterate_is_kept():
    # A non-converged iterate is not a factor of safety (result-object convention of the
    # solver): fos is NaN, last_iterate keeps where the iteration stopped.
    slices = _circles()
    for method in ("bishop_simplified", "janbu_simplified", "spencer", "morgenstern_price"):
        stopped = factor_of_safety(slices, method, tolerance=1e-14, max_iterations=1)
        done = factor_of_safety(slices, method, **TIGHT)
        assert np.all(np.isnan(stopped.fos)), method
        assert np.all(np.isfinite(stopped.last_iterate)), method
        np.testing.assert_array_equal(done.last_iterate, done.fos)
        assert np.isnan(stopped.surface(0).fos) and stopped.surface(0).last_iterate > 0


def test_ordinary_resolves_the_crack_water_thrust_normal_to_the_base():
    # Every load of a slice resolved normal to its base, as kh W is (Fellenius 1936, applied
    # to the crack-water force P_w on the first slice):
    # N = (W + Q) cos a - (kh W + P_w) sin a, N' = N - u l (conventional form).
    slices = _loaded_circles()
    result = ordinary(slices, side_water=False)
    a = slices.alpha
    crack = np.zeros_like(slices.weight)
    crack[:, 0] = slices.crack_water_force
    expected = ((slices.weight + slices.surcharge) * np.cos(a)
                - (slices.kh * slices.weight + crack) * np.sin(a)
                - slices.pore_pressure * slices.base_length)
    np.testing.assert_allclose(result.normal_force, expected, rtol=1e-12, atol=1e-9)
    assert np.all(crack[:, 0] > 0)


def test_ordinary_side_water_must_be_a_flag():
    with pytest.raises(MethodError, match="side_water must be True or False, got 'no'"):
        ordinary(_circles(), side_water="no")


def test_non_convergence_is_flagged_not_hidden():
    slices = _circles()
    for method in ("bishop_simplified", "janbu_simplified", "spencer", "morgenstern_price"):
        result = factor_of_safety(slices, method, tolerance=1e-14, max_iterations=1)
        assert not result.converged.any(), method
        assert not result.admissible.any(), method
        assert all("not converged within max_iterations=1" in m for m in result.message)


# ------------------------------------------------------------------------------------------
# Errors


def test_unknown_method_lists_the_valid_names():
    with pytest.raises(
        MethodError,
        match="unknown method 'swedish'; valid methods: ordinary, bishop_simplified, "
        "janbu_simplified, spencer, morgenstern_price",
    ):
        factor_of_safety(_circles(), "swedish")


@pytest.mark.parametrize("tolerance", [0.0, -1e-4, float("nan"), float("inf"), "1e-4", True])
def test_bad_tolerance_is_rejected_with_its_value(tolerance):
    with pytest.raises(MethodError, match="tolerance must be a positive finite number, got"):
        bishop_simplified(_circles(), tolerance=tolerance)


@pytest.mark.parametrize("max_iterations", [0, -3, 2.5, True, None])
def test_bad_iteration_limit_is_rejected_with_its_value(max_iterations):
    with pytest.raises(MethodError, match=r"max_iterations must be a positive integer, got"):
        spencer(_circles(), max_iterations=max_iterations)


def test_unknown_option_and_interslice_function_are_rejected():
    with pytest.raises(MethodError, match="method 'ordinary' takes no option 'tolerance'"):
        factor_of_safety(_circles(), "ordinary", tolerance=1e-3)
    with pytest.raises(MethodError, match="unknown interslice function 'trapezoid'; valid: "
                                          "constant, half_sine"):
        morgenstern_price(_circles(), interslice="trapezoid")


def test_make_slices_defaults():
    slices = make_slices(
        x_left=[0.0], x_right=[1.0], alpha=[0.3], y_base=[0.0], y_top=[2.0], weight=[40.0],
        cohesion=[5.0], tan_phi=[0.5],
    )
    assert slices.active.all() and slices.surcharge[0, 0] == 0.0


def test_morgenstern_price_never_reports_convergence_without_moment_equilibrium():
    # Identical slices of an infinite slope with kh = 0.15: the interslice forces vanish, so
    # lambda cannot balance the moment of kh W, and no (F, lambda) satisfies both equilibria.
    # The result must say so (Morgenstern and Price 1965 require force AND moment equilibrium),
    # not return a converged-looking number (found by review).
    slices = dataclasses.replace(infinite_slope_slices(28.0, 3.0, 19.5, 4.0, 31.0, 1.0), kh=0.15)
    result = morgenstern_price(slices)
    assert not result.converged[0]
    assert not result.admissible[0]
    assert "equilibrium not satisfied" in result.message[0] or not np.isfinite(result.fos[0])
