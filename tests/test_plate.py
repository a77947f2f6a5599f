"""Clamped-plate mechanics: closed-form circle and the finite-difference solver."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from popmeter import plate

# Timoshenko & Woinowsky-Krieger, Theory of Plates and Shells, 2nd ed. (1959), Table 35:
# centre deflection w = alpha q a^4 / D of a clamped rectangle (a short side, b long side), nu = 0.3.
TIMOSHENKO_TABLE_35 = {
    1.0: 0.00126, 1.1: 0.00150, 1.2: 0.00172, 1.3: 0.00191, 1.4: 0.00207, 1.5: 0.00220,
    1.6: 0.00230, 1.7: 0.00238, 1.8: 0.00245, 1.9: 0.00249, 2.0: 0.00254,
}


def test_flexural_rigidity():
    # D = E h^3 / (12 (1 - nu^2)) (Timoshenko & Woinowsky-Krieger, eq. 3)
    assert plate.flexural_rigidity(110e9, 1e-4, 0.33) == pytest.approx(0.0102869, rel=1e-5)


def test_circle_volume_is_the_integral_of_the_deflection():
    # Timoshenko & Woinowsky-Krieger eq. (62): w = q (a^2 - r^2)^2 / (64 D); volume pi q a^6 / (192 D)
    a, q, d = 0.0125, 250.0, 0.0103
    vol_quad, _ = integrate.quad(lambda r: 2 * math.pi * r
                                 * float(plate.circle_deflection_m(r, radius_m=a, pressure_pa=q,
                                                                   rigidity_n_m=d)), 0, a)
    vol = plate.circle_volume_m3(radius_m=a, pressure_pa=q, rigidity_n_m=d)
    assert vol == pytest.approx(math.pi * q * a**6 / (192 * d))
    assert vol_quad == pytest.approx(vol, rel=1e-9)
    centre = float(plate.circle_deflection_m(0.0, radius_m=a, pressure_pa=q, rigidity_n_m=d))
    # the mean deflection is a third of the centre deflection
    assert vol / (math.pi * a**2) == pytest.approx(centre / 3)
    assert plate.circle_compliance_m3_pa(radius_m=a, rigidity_n_m=d) == pytest.approx(vol / q)
    assert float(plate.circle_deflection_m(2 * a, radius_m=a, pressure_pa=q, rigidity_n_m=d)) == 0.0


def test_circle_modes_leissa():
    # Leissa, NASA SP-160 (1969): clamped circle lambda^2 = 10.2158, 21.26, 34.88, 39.771
    assert plate.CIRCLE_LAMBDA2[:4] == pytest.approx((10.2158, 21.26, 34.88, 39.771), rel=2e-4)
    f = plate.circle_mode_frequencies_hz(radius_m=0.0125, rigidity_n_m=0.0102869,
                                         surface_density_kg_m2=0.853)
    assert f[0] == pytest.approx(10.2158 / (2 * math.pi * 0.0125**2) * math.sqrt(0.0102869 / 0.853))
    assert len(f) == 6 and np.all(np.diff(f) > 0)


def test_circle_lambda2_from_the_bessel_roots():
    # The clamped circle's frequency equation J_n(l) I_{n+1}(l) + I_n(l) J_{n+1}(l) = 0
    # (Leissa, NASA SP-160, eq. 2.8); lambda^2 = l^2. Roots by scipy: an outside check of the table.
    from scipy.optimize import brentq
    from scipy.special import iv, jv

    def eq(lam, n):
        return jv(n, lam) * iv(n + 1, lam) + iv(n, lam) * jv(n + 1, lam)

    roots = []
    for n in range(4):
        grid = np.linspace(0.5, 9.0, 2000)
        vals = eq(grid, n)
        for i in np.flatnonzero(np.sign(vals[:-1]) != np.sign(vals[1:])):
            roots.append(brentq(eq, grid[i], grid[i + 1], args=(n,)) ** 2)
    roots = sorted(roots)[:6]
    assert roots == pytest.approx(plate.CIRCLE_LAMBDA2, rel=2e-5)


@pytest.mark.parametrize("ratio", sorted(TIMOSHENKO_TABLE_35))
def test_rectangle_centre_deflection_timoshenko_table_35(ratio):
    # Timoshenko & Woinowsky-Krieger, Table 35 (3 significant figures; the table is rounded)
    coeffs = plate.rectangle_coefficients(ratio)
    assert coeffs.centre_coeff == pytest.approx(TIMOSHENKO_TABLE_35[ratio], abs=0.6e-5 + 0.002 * TIMOSHENKO_TABLE_35[ratio])


def test_long_rectangle_tends_to_the_clamped_strip():
    # Clamped strip (beam in cylindrical bending): w_max = q a^4 / (384 D) (Timoshenko, Table 35, b/a = inf)
    coeffs = plate.rectangle_coefficients(5.0)
    assert coeffs.centre_coeff == pytest.approx(1 / 384, rel=3e-3)
    # strip volume per unit length: q a^5 / (720 D); the 5:1 plate loses some near its short ends
    assert 0.85 < coeffs.volume_coeff / (5.0 / 720) < 1.0


def test_square_modes_leissa():
    # Leissa, NASA SP-160: clamped square (a = side) 35.99, 73.39 (double), 108.2, 131.6
    lam = plate.rectangle_coefficients(1.0).lambda2
    assert lam[0] == pytest.approx(35.99, rel=2e-3)
    assert lam[1] == pytest.approx(73.39, rel=2e-3)
    assert lam[2] == pytest.approx(73.39, rel=2e-3)
    assert lam[3] == pytest.approx(108.2, rel=2e-3)
    assert lam[4] == pytest.approx(131.6, rel=2e-3)


def test_solver_converges_to_the_closed_form_circle():
    # the finite-difference solver on a stair-stepped disc mask approaches pi/192 (volume),
    # 1/64 (centre) and Leissa's 10.2158 (Timoshenko & Woinowsky-Krieger eq. 62; Leissa NASA SP-160)
    exact = plate.circle_coefficients()
    errors_vol, errors_f = [], []
    for cells in (20, 40, 80):
        c = plate.circle_mask_coefficients(cells, modes=1)
        errors_vol.append(abs(c.volume_coeff / exact.volume_coeff - 1))
        errors_f.append(abs(c.lambda2[0] / exact.lambda2[0] - 1))
    assert errors_vol[0] > errors_vol[1] > errors_vol[2]
    assert errors_f[0] > errors_f[1] > errors_f[2]
    assert errors_vol[-1] < 0.07 and errors_f[-1] < 0.02
    # first order: each halving of the step roughly halves the error
    assert 1.4 < errors_vol[1] / errors_vol[2] < 3.0


def test_solver_mask_matches_the_rectangle_path():
    mask = np.zeros((21, 31), dtype=bool)  # 20 x 30 cells, edge nodes fixed
    mask[1:-1, 1:-1] = True
    h = 1.0 / 20
    sol = plate.solve_clamped_mask(mask, dx_m=h, dy_m=h, modes=2)
    # a 30 x 20 cell plate with side 1 (short) x 1.5 (long): one grid of the Richardson pair
    coeffs = plate.rectangle_coefficients(1.5)
    assert sol.volume_m3 == pytest.approx(coeffs.volume_coeff, rel=0.04)  # O(h^2) error of one grid
    assert sol.omega_rad_s[0] == pytest.approx(coeffs.lambda2[0], rel=0.02)
    assert sol.nodes == 19 * 29
    with pytest.raises(ValueError, match="False border"):
        plate.solve_clamped_mask(np.ones((5, 5), dtype=bool), dx_m=1, dy_m=1)


def test_clamped_plate_dimensional_and_scaling():
    circle = plate.clamped_plate(shape="circle", diameter_m=0.025, thickness_m=1e-4,
                                 youngs_modulus_pa=110e9, poisson_ratio=0.33, density_kg_m3=8530)
    d = plate.flexural_rigidity(110e9, 1e-4, 0.33)
    assert circle.compliance_m3_pa == pytest.approx(math.pi * 0.0125**6 / (192 * d))
    rect = plate.clamped_plate(shape="rectangle", width_m=0.035, length_m=0.030, thickness_m=1e-4,
                               youngs_modulus_pa=110e9, poisson_ratio=0.33, density_kg_m3=8530)
    double = plate.clamped_plate(shape="rectangle", width_m=0.070, length_m=0.060, thickness_m=1e-4,
                                 youngs_modulus_pa=110e9, poisson_ratio=0.33, density_kg_m3=8530)
    # compliance scales as L^6, frequency as L^-2 (Kirchhoff plate theory)
    assert double.compliance_m3_pa == pytest.approx(64 * rect.compliance_m3_pa)
    assert double.mode_frequencies_hz[0] == pytest.approx(rect.mode_frequencies_hz[0] / 4)
    with pytest.raises(ValueError):
        plate.clamped_plate(shape="rectangle", width_m=0.03, thickness_m=1e-4, youngs_modulus_pa=1e11,
                            poisson_ratio=0.3, density_kg_m3=8000)


def test_rectangle_coefficients_are_cached_and_fast():
    import time

    t0 = time.perf_counter()
    first = plate.rectangle_coefficients(1.3579)
    t1 = time.perf_counter()
    again = plate.rectangle_coefficients(1 / 1.3579)  # same outline, turned
    t2 = time.perf_counter()
    assert again is first
    assert t2 - t1 < t1 - t0
