"""Mechanics of the clamped diaphragm: a thin elastic plate fixed at its edge.

Two tools:

1. The clamped **circle** in closed form (Timoshenko & Woinowsky-Krieger,
   *Theory of Plates and Shells*, 2nd ed., 1959, section 15): under uniform
   pressure q the deflection is ``w(r) = q (a^2 - r^2)^2 / (64 D)``; the mean
   deflection is a third of the centre deflection, so the displaced volume is
   ``pi q a^6 / (192 D)`` and the volumetric compliance ``pi a^6 / (192 D)``.
   Its natural frequencies are ``f_k = lambda_k^2 / (2 pi a^2) sqrt(D / (rho h))``
   with the roots of Leissa, *Vibration of Plates*, NASA SP-160 (1969).

2. A **finite-difference solver** of the clamped plate for rectangles and any
   outline given as a mask on a grid: the biharmonic operator
   ``D (w_xxxx + 2 w_xxyy + w_yyyy)`` with the standard 13-point stencil
   (separate spacings in x and y), ``w = 0`` at the outline and zero slope
   imposed with mirrored ghost nodes (e.g. Szilard, *Theories and
   Applications of Plate Analysis*, 2004, ch. 5). It gives the static
   compliance (displaced volume per pressure) and the first modes from the
   eigenproblem ``K w = omega^2 (rho h) w`` (lumped mass). For rectangles the
   node grid lies on the edges, the scheme is second order, and two grids are
   combined by Richardson extrapolation; a curved outline on a mask is
   stair-stepped (first order). Results are cached per geometry.

All functions use SI units: lengths in m, pressure in Pa, rigidity D in N m,
surface density rho*h in kg/m^2, compliance in m^3/Pa, frequencies in Hz.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

FloatOrArray = float | np.ndarray
"""A float or a numpy array of floats (the vectorised functions accept either)."""

#: Frequency parameters lambda^2 = omega a^2 sqrt(rho h / D) of the clamped
#: circular plate, a = radius (Leissa, NASA SP-160, 1969, Table 2.1; values
#: recomputed from the exact Bessel-function roots, physics.md).
CIRCLE_LAMBDA2: tuple[float, ...] = (10.2158, 21.2604, 34.8770, 39.7711, 51.0300, 60.8287)

#: Added-virtual-mass factor of a clamped circular plate wetted on one side
#: (Lamb, Proc. R. Soc. A 98, 1920): f_wet = f_dry / sqrt(1 + Gamma rho_w a / (rho_s h)).
LAMB_GAMMA = 0.6689


def flexural_rigidity(youngs_modulus_pa: FloatOrArray, thickness_m: FloatOrArray,
                      poisson_ratio: FloatOrArray) -> FloatOrArray:
    """Flexural rigidity ``D = E h^3 / (12 (1 - nu^2))`` in N m (array-friendly)."""
    return youngs_modulus_pa * thickness_m**3 / (12.0 * (1.0 - poisson_ratio**2))


# --- closed-form clamped circle ---------------------------------------------------


def circle_deflection_m(r_m: FloatOrArray, *, radius_m: float, pressure_pa: float,
                        rigidity_n_m: float) -> np.ndarray:
    """Deflection ``w(r) = q (a^2 - r^2)^2 / (64 D)`` of a clamped circular plate, m.

    Timoshenko & Woinowsky-Krieger (1959), eq. (62). ``r_m`` may be an array; zero outside the plate.
    """
    r = np.asarray(r_m, dtype=float)
    w = pressure_pa * (radius_m**2 - r**2) ** 2 / (64.0 * rigidity_n_m)
    return np.where(np.abs(r) <= radius_m, w, 0.0)


def circle_volume_m3(*, radius_m: FloatOrArray, pressure_pa: FloatOrArray,
                     rigidity_n_m: FloatOrArray) -> FloatOrArray:
    """Displaced volume ``pi q a^6 / (192 D)`` of a clamped circular plate, m^3."""
    return math.pi * pressure_pa * radius_m**6 / (192.0 * rigidity_n_m)


def circle_compliance_m3_pa(*, radius_m: FloatOrArray, rigidity_n_m: FloatOrArray) -> FloatOrArray:
    """Volumetric compliance ``pi a^6 / (192 D)`` of a clamped circular plate, m^3/Pa."""
    return math.pi * radius_m**6 / (192.0 * rigidity_n_m)


def mode_frequency_hz(lambda2: FloatOrArray, *, length_m: FloatOrArray, rigidity_n_m: FloatOrArray,
                      surface_density_kg_m2: FloatOrArray) -> FloatOrArray:
    """``f = lambda^2 / (2 pi L^2) sqrt(D / (rho h))`` in Hz for a frequency parameter ``lambda2``.

    ``L`` is the radius of a circle or the short side of a rectangle.
    """
    return lambda2 / (2.0 * math.pi * length_m**2) * np.sqrt(rigidity_n_m / surface_density_kg_m2)


def circle_mode_frequencies_hz(*, radius_m: float, rigidity_n_m: float,
                               surface_density_kg_m2: float, modes: int = 6) -> list[float]:
    """The first ``modes`` (<= 6) natural frequencies of a clamped circle in vacuo, Hz (Leissa)."""
    return [float(mode_frequency_hz(l2, length_m=radius_m, rigidity_n_m=rigidity_n_m,
                                    surface_density_kg_m2=surface_density_kg_m2))
            for l2 in CIRCLE_LAMBDA2[:modes]]


def lamb_wet_factor(*, radius_m: FloatOrArray, surface_density_kg_m2: FloatOrArray,
                    water_density_kg_m3: FloatOrArray = 998.0) -> FloatOrArray:
    """Factor ``1 / sqrt(1 + Gamma rho_w a / (rho_s h))`` that lowers the ring with water on one side.

    Lamb (1920), Gamma = 0.6689, derived for the fundamental mode of a clamped
    circle; ``radius_m`` of another outline is its equivalent radius
    sqrt(area / pi) (an approximation, common practice, no source).
    ``water_density_kg_m3`` defaults to 998 kg/m^3, water near 20 C.
    """
    return 1.0 / np.sqrt(1.0 + LAMB_GAMMA * water_density_kg_m3 * radius_m / surface_density_kg_m2)


# --- finite-difference solver ----------------------------------------------------


@dataclass(frozen=True)
class PlateSolution:
    """Finite-difference solution of a clamped plate with D = 1 N m, q = 1 Pa, rho h = 1 kg/m^2.

    Scale to a real plate: compliance = ``volume_m3 / D``; centre deflection =
    ``centre_deflection_m * q / D``; omega_k = ``omega_rad_s[k] * sqrt(D / (rho h))``.

    Attributes:
        volume_m3: displaced volume (m^3) for q/D = 1.
        centre_deflection_m: deflection at the node nearest the centroid (m) for q/D = 1.
        omega_rad_s: the lowest angular frequencies (rad/s) for D/(rho h) = 1.
        nodes: number of unknowns.
    """

    volume_m3: float
    centre_deflection_m: float
    omega_rad_s: tuple[float, ...]
    nodes: int


def _second_diff(n: int) -> sp.csr_matrix:
    return sp.diags([np.ones(n - 1), -2.0 * np.ones(n), np.ones(n - 1)], [-1, 0, 1], format="csr")


def _fourth_diff(n: int) -> sp.csr_matrix:
    return sp.diags([np.ones(n - 2), -4.0 * np.ones(n - 1), 6.0 * np.ones(n),
                     -4.0 * np.ones(n - 1), np.ones(n - 2)], [-2, -1, 0, 1, 2], format="csr")


def solve_clamped_mask(mask: np.ndarray, *, dx_m: float, dy_m: float, modes: int = 6,
                       centre: tuple[int, int] | None = None) -> PlateSolution:
    """Solve the clamped plate whose free part is the ``True`` nodes of ``mask``.

    Nodes outside the mask are fixed (w = 0); where an inside node's neighbour
    is outside, the node beyond is a mirrored ghost (zero slope), which makes
    the outline clamped. The outline of a rectangle should pass through nodes
    (the edge nodes are ``False``); a curved outline is stair-stepped.

    Args:
        mask: 2-D boolean array indexed ``[iy, ix]``; it must have a ``False``
            border.
        dx_m, dy_m: node spacing along axis 1 (x) and axis 0 (y), m.
        modes: number of modes to compute (0 for statics only); default 6,
            enough for the ring and its overtones.
        centre: ``(iy, ix)`` node for the centre deflection; default the inside
            node nearest the centroid of the mask.

    Returns:
        :class:`PlateSolution` for D = 1 N m, q = 1 Pa, rho h = 1 kg/m^2.
    """
    mask = np.asarray(mask, dtype=bool)
    ny, nx = mask.shape
    if mask[0].any() or mask[-1].any() or mask[:, 0].any() or mask[:, -1].any():
        raise ValueError("the mask must have a False border (the clamped edge)")
    inside = np.flatnonzero(mask.ravel())
    if inside.size == 0:
        raise ValueError("the mask has no free nodes")
    ix4, iy4 = 1.0 / dx_m**4, 1.0 / dy_m**4
    full = (sp.kron(sp.identity(ny), _fourth_diff(nx)) * ix4
            + 2.0 / (dx_m**2 * dy_m**2) * sp.kron(_second_diff(ny), _second_diff(nx))
            + sp.kron(_fourth_diff(ny), sp.identity(nx)) * iy4)
    k = full.tocsr()[inside][:, inside]
    # zero slope: the node beyond an outside neighbour mirrors the node itself
    padded = np.pad(mask, 2, constant_values=False)
    iy_all, ix_all = np.divmod(inside, nx)
    index = np.full(mask.shape, -1, dtype=np.int64)
    index.ravel()[inside] = np.arange(inside.size)
    extra_diag = np.zeros(inside.size)
    drop_i: list[np.ndarray] = []
    drop_j: list[np.ndarray] = []
    for ddy, ddx, w4 in ((0, 1, ix4), (0, -1, ix4), (1, 0, iy4), (-1, 0, iy4)):
        outside = ~padded[iy_all + 2 + ddy, ix_all + 2 + ddx]
        extra_diag[outside] += w4
        # a free node across a one-node-wide fixed strip: decouple it
        across = outside & padded[iy_all + 2 + 2 * ddy, ix_all + 2 + 2 * ddx]
        if across.any():
            rows = np.flatnonzero(across)
            drop_i.append(rows)
            drop_j.append(index[iy_all[rows] + 2 * ddy, ix_all[rows] + 2 * ddx])
    k = (k + sp.diags(extra_diag)).tolil() if drop_i else k + sp.diags(extra_diag)
    if drop_i:
        k[np.concatenate(drop_i), np.concatenate(drop_j)] = 0.0
    k = sp.csc_matrix(k)
    lu = spla.splu(k)
    w = lu.solve(np.ones(inside.size))
    volume = float(w.sum() * dx_m * dy_m)
    if centre is None:
        cy, cx = iy_all.mean(), ix_all.mean()
        c = int(np.argmin((iy_all - cy) ** 2 + (ix_all - cx) ** 2))
    else:
        c = int(index[centre])
    omegas: tuple[float, ...] = ()
    if modes > 0:
        n_modes = min(modes, inside.size - 2)
        op = spla.LinearOperator(k.shape, matvec=lu.solve, dtype=float)
        vals = spla.eigsh(k, k=n_modes, sigma=0.0, which="LM", OPinv=op,
                          return_eigenvectors=False, tol=1e-10)
        omegas = tuple(float(v) for v in np.sqrt(np.sort(np.abs(vals))))
    return PlateSolution(volume, float(w[c]), omegas, int(inside.size))


@dataclass(frozen=True)
class ShapeCoefficients:
    """Dimensionless results for a clamped outline with length scale L.

    compliance = ``volume_coeff * L^6 / D``; centre deflection =
    ``centre_coeff * q L^4 / D``; f_k = ``lambda2[k] / (2 pi L^2) sqrt(D / (rho h))``.
    For a rectangle L is the short side; for a circle the radius.
    """

    volume_coeff: float
    centre_coeff: float
    lambda2: tuple[float, ...]


def _rectangle_grid(aspect: float, cells: int) -> tuple[np.ndarray, float, float, tuple[int, int]]:
    nx = cells                                  # along the short side (length 1)
    ny = max(cells, round(aspect * cells))  # along the long side (length aspect)
    if ny % 2:
        ny += 1
    mask = np.zeros((ny + 1, nx + 1), dtype=bool)
    mask[1:-1, 1:-1] = True
    return mask, 1.0 / nx, aspect / ny, (ny // 2, nx // 2)


@lru_cache(maxsize=256)
def _rectangle_coefficients(aspect_key: float, cells: int, modes: int) -> ShapeCoefficients:
    results = []
    for n in (cells, 2 * cells):
        mask, dx, dy, centre = _rectangle_grid(aspect_key, n)
        results.append(solve_clamped_mask(mask, dx_m=dx, dy_m=dy, modes=modes, centre=centre))
    coarse, fine = results

    def rich(a: float, b: float) -> float:
        # Richardson extrapolation of a second-order scheme: (4 fine - coarse) / 3
        return (4.0 * b - a) / 3.0

    m = min(len(coarse.omega_rad_s), len(fine.omega_rad_s))
    lam = tuple(rich(coarse.omega_rad_s[i], fine.omega_rad_s[i]) for i in range(m))
    return ShapeCoefficients(rich(coarse.volume_m3, fine.volume_m3),
                             rich(coarse.centre_deflection_m, fine.centre_deflection_m), lam)


def rectangle_coefficients(aspect_ratio: float, *, cells: int = 24, modes: int = 6) -> ShapeCoefficients:
    """Dimensionless coefficients of a clamped rectangle with sides 1 and ``aspect_ratio``.

    Args:
        aspect_ratio: long side / short side (values below 1 are inverted).
        cells: grid cells across the short side on the coarse grid; the fine
            grid has twice as many and the two are Richardson-extrapolated.
            Default 24: coefficients agree with Timoshenko's Table 35 to about
            0.5 % and the solve takes well under a second.
        modes: number of modes (default 6).

    Results are cached per (aspect ratio rounded to 1e-4, cells, modes).
    """
    aspect = float(aspect_ratio)
    if not aspect > 0:
        raise ValueError("aspect_ratio must be positive")
    if aspect < 1.0:
        aspect = 1.0 / aspect
    return _rectangle_coefficients(round(aspect, 4), int(cells), int(modes))


def circle_coefficients(modes: int = 6) -> ShapeCoefficients:
    """Closed-form coefficients of the clamped circle (L = radius)."""
    return ShapeCoefficients(math.pi / 192.0, 1.0 / 64.0, CIRCLE_LAMBDA2[:modes])


def circle_mask_coefficients(cells_across: int, *, modes: int = 6) -> ShapeCoefficients:
    """Coefficients of the clamped circle from the finite-difference solver on a mask.

    The disc of radius 1 is stair-stepped on a square grid with ``cells_across``
    cells across the diameter (free nodes strictly inside r < 1). Used to check
    the solver against the closed form; first-order accurate.
    """
    h = 2.0 / cells_across
    n = cells_across + 5
    coords = (np.arange(n) - (n - 1) / 2.0) * h
    xx, yy = np.meshgrid(coords, coords)
    mask = xx**2 + yy**2 < 1.0 - 1e-12
    centre = ((n - 1) // 2, (n - 1) // 2) if n % 2 == 1 else None
    sol = solve_clamped_mask(mask, dx_m=h, dy_m=h, modes=modes, centre=centre)
    return ShapeCoefficients(sol.volume_m3, sol.centre_deflection_m, sol.omega_rad_s)


@dataclass(frozen=True)
class PlateResult:
    """Dimensional results for one plate: compliance, rigidity and modes (SI)."""

    rigidity_n_m: float
    compliance_m3_pa: float
    centre_deflection_m_per_pa: float
    mode_frequencies_hz: tuple[float, ...]


def clamped_plate(*, shape: str, thickness_m: float, youngs_modulus_pa: float,
                  poisson_ratio: float, density_kg_m3: float, diameter_m: float | None = None,
                  width_m: float | None = None, length_m: float | None = None) -> PlateResult:
    """Compliance (m^3/Pa), centre deflection per pressure (m/Pa) and dry modes (Hz) of a clamped plate.

    ``shape`` is ``"circle"`` (give ``diameter_m``; closed form) or
    ``"rectangle"`` (give ``width_m`` and ``length_m``; finite differences).
    """
    d = float(flexural_rigidity(youngs_modulus_pa, thickness_m, poisson_ratio))
    if shape == "circle":
        if diameter_m is None:
            raise ValueError("a circle needs diameter_m")
        scale = diameter_m / 2.0
        coeffs = circle_coefficients()
    elif shape == "rectangle":
        if width_m is None or length_m is None:
            raise ValueError("a rectangle needs width_m and length_m")
        scale = min(width_m, length_m)
        coeffs = rectangle_coefficients(max(width_m, length_m) / scale)
    else:
        raise ValueError(f"unknown shape {shape!r}")
    rho_h = density_kg_m3 * thickness_m
    modes = tuple(float(mode_frequency_hz(l2, length_m=scale, rigidity_n_m=d, surface_density_kg_m2=rho_h))
                  for l2 in coeffs.lambda2)
    return PlateResult(d, coeffs.volume_coeff * scale**6 / d, coeffs.centre_coeff * scale**4 / d, modes)
