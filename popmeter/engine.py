"""The lumped engine model: water columns, gas spring and diaphragm.

Acoustic analogy (pressure p, volume flow), SI units throughout:

- water-column inertance of one tube ``M_t = rho_w (L + dL) / (pi r^2)``, the
  end correction at the open outlet ``dL = 0.6133 r`` unflanged (Levine &
  Schwinger, Phys. Rev. 73, 1948) or ``0.8216 r`` flanged (Norris & Sheng,
  J. Sound Vib. 135, 1989); ``n`` tubes in parallel give ``M = M_t / n``;
- gas spring ``C_g = V_g / (n_poly p0)`` (n_poly between 1, isothermal, and
  gamma, adiabatic);
- diaphragm compliance ``C_p`` from :mod:`popmeter.plate` (closed form for a
  circle, ``pi a^6 / (192 D)``; finite differences for a rectangle).

The springs share the volume pushed into the boiler, so the compliances add
and the engine runs near ``f = 1 / (2 pi sqrt(M (C_g + C_p)))``. With
``C_p = 0`` this is the Helmholtz resonator ``omega0 = c sqrt(S / (V L'))``
(Kinsler et al., *Fundamentals of Acoustics*, 4th ed., 2000, sec. 10.8).

The click rings at the plate's own modes, ``f_k = lambda_k^2 / (2 pi a^2)
sqrt(D / (rho_s h))`` (Leissa, NASA SP-160, 1969), lowered with water on one
side by Lamb's added-mass factor ``1 / sqrt(1 + 0.6689 rho_w a / (rho_s h))``
(Lamb, 1920). Lamb's factor belongs to the fundamental mode; it is applied to
the higher modes too, which underestimates them a little when wetted.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np

from popmeter import plate
from popmeter.plate import FloatOrArray
from popmeter.profile import BoatProfile, Quantity, load_profile
from popmeter.safety import SAFETY_LINE

#: Outlet end corrections as a fraction of the tube radius.
END_CORRECTION: dict[str, float] = {
    "unflanged": 0.6133,  # Levine & Schwinger (1948)
    "flanged": 0.8216,    # Norris & Sheng (1989)
}

PA_PER_M3_TO_KPA_PER_ML = 1e-9
"""1 Pa/m^3 = 1e-9 kPa/mL."""



# --- vectorised building blocks (numpy arrays or floats) ------------------------------


def end_correction_m(radius_m: FloatOrArray, *, outlet: str = "unflanged") -> FloatOrArray:
    """Outlet end correction ``dL`` in m for a tube of inner radius ``radius_m`` (m).

    ``outlet``: ``"unflanged"`` (default, a bare tube end; 0.6133 r, Levine &
    Schwinger 1948) or ``"flanged"`` (0.8216 r, Norris & Sheng 1989).
    """
    return END_CORRECTION[outlet] * radius_m


def inertance_kg_m4(*, inner_diameter_m: FloatOrArray, length_m: FloatOrArray, count: FloatOrArray = 1,
                    outlet: str = "unflanged", water_density_kg_m3: FloatOrArray = 998.0) -> FloatOrArray:
    """Inertance of ``count`` identical water columns in parallel, kg/m^4.

    ``M = rho_w (L + dL) / (pi r^2 count)`` with the outlet end correction.
    Defaults: one tube, a bare (unflanged) end, water at 998 kg/m^3 (near 20 C).
    """
    r = inner_diameter_m / 2.0
    return water_density_kg_m3 * (length_m + end_correction_m(r, outlet=outlet)) / (math.pi * r**2 * count)


def gas_compliance_m3_pa(*, gas_volume_m3: FloatOrArray, polytropic_index: FloatOrArray = 1.0,
                         pressure_pa: FloatOrArray = 101325.0) -> FloatOrArray:
    """Compliance of the gas spring ``V_g / (n_poly p0)``, m^3/Pa.

    Defaults: isothermal (n_poly = 1), one standard atmosphere (101 325 Pa).
    """
    return gas_volume_m3 / (polytropic_index * pressure_pa)


def cycle_rate_hz(*, inertance_kg_m4: FloatOrArray, compliance_m3_pa: FloatOrArray) -> FloatOrArray:
    """Natural frequency ``1 / (2 pi sqrt(M C))`` of the water columns on the springs, Hz."""
    return 1.0 / (2.0 * math.pi * np.sqrt(inertance_kg_m4 * compliance_m3_pa))


@dataclass(frozen=True)
class PlateGeometry:
    """What the model needs of the diaphragm's outline.

    ``scale_m``: radius (circle) or short side (rectangle); ``coeffs``: the
    dimensionless plate coefficients for that scale; ``equivalent_radius_m``:
    sqrt(area/pi), used for Lamb's wet factor.
    """

    shape: str
    scale_m: float
    aspect: float
    coeffs: plate.ShapeCoefficients
    equivalent_radius_m: float


def plate_geometry(profile: BoatProfile) -> PlateGeometry:
    """Nominal plate geometry of the profile's diaphragm (cached solver for rectangles)."""
    dia = profile.diaphragm
    scale = dia.short_side_m.value
    aspect = dia.long_side_m.value / scale
    coeffs = plate.circle_coefficients() if dia.shape == "circle" else plate.rectangle_coefficients(aspect)
    return PlateGeometry(dia.shape, scale, aspect, coeffs, math.sqrt(dia.area_m2 / math.pi))


def shape_coefficients(shape: str, aspect) -> tuple[np.ndarray, np.ndarray]:
    """Volume coefficient and lambda^2 of each mode for an array of aspect ratios.

    Circle: constants. Rectangle: the finite-difference coefficients on a grid
    of aspect ratios 0.01 apart covering the requested ones (cached, so
    repeated estimates with similar draws reuse the solves), linearly
    interpolated in between (the interpolation error is below 1e-4 relative
    for the compliance and the fundamental; up to about 0.2 % for higher modes
    near aspect ratios where two modes cross).

    Returns:
        ``(volume_coeff, lambda2)`` with shapes ``aspect.shape`` and ``aspect.shape + (modes,)``.
    """
    aspect = np.asarray(aspect, dtype=float)
    if shape == "circle":
        c = plate.circle_coefficients()
        return (np.full(aspect.shape, c.volume_coeff),
                np.broadcast_to(np.array(c.lambda2), aspect.shape + (len(c.lambda2),)).copy())
    lo, hi = float(aspect.min()), float(aspect.max())
    if hi - lo < 1e-4:
        c = plate.rectangle_coefficients(0.5 * (lo + hi))
        return (np.full(aspect.shape, c.volume_coeff),
                np.broadcast_to(np.array(c.lambda2), aspect.shape + (len(c.lambda2),)).copy())
    step = 0.01
    first, last = math.floor(lo / step), math.ceil(hi / step)
    grid = np.arange(first, last + 1) * step
    cs = [plate.rectangle_coefficients(a) for a in grid]
    vol = np.interp(aspect, grid, [c.volume_coeff for c in cs])
    m = min(len(c.lambda2) for c in cs)
    lam = np.stack([np.interp(aspect, grid, [c.lambda2[k] for c in cs]) for k in range(m)], axis=-1)
    return vol, lam


def outline_scale(values: dict[str, np.ndarray], shape: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Length scale (m), aspect ratio and area (m^2) of the diaphragm's outline.

    The scale is the radius of a circle and the short side of a rectangle (the
    lengths the plate tables are written in); the aspect ratio is long side
    over short side (1 for a circle). ``values`` holds ``diameter_m`` or
    ``width_m`` and ``length_m`` (arrays: one entry per Monte Carlo draw).
    """
    if shape == "circle":
        scale = values["diameter_m"] / 2.0
        return scale, np.ones_like(scale), math.pi * scale**2
    scale = np.minimum(values["width_m"], values["length_m"])
    aspect = np.maximum(values["width_m"], values["length_m"]) / scale
    return scale, aspect, values["width_m"] * values["length_m"]


def forward(values: dict[str, Any], *, shape: str, outlet: str, wetted: bool) -> dict[str, np.ndarray]:
    """Vectorised forward model on a dictionary of SI inputs (floats or equal-shape arrays).

    Keys of ``values``: ``inner_diameter_m``, ``tube_length_m``, ``count``,
    ``gas_volume_m3``, ``polytropic_index``, ``pressure_pa``, ``thickness_m``,
    ``youngs_modulus_pa``, ``poisson_ratio``, ``density_kg_m3``,
    ``water_density_kg_m3`` and the outline: ``diameter_m`` (circle) or
    ``width_m`` and ``length_m`` (rectangle).

    Returns:
        arrays ``rate_hz``, ``ring_hz``, ``ring_modes_hz`` (last axis = mode),
        ``dry_ring_hz``, ``inertance_kg_m4``, ``gas_compliance_m3_pa``,
        ``plate_compliance_m3_pa``, ``rigidity_n_m``.
    """
    v = {k: np.asarray(x, dtype=float) for k, x in values.items()}
    m = inertance_kg_m4(inner_diameter_m=v["inner_diameter_m"], length_m=v["tube_length_m"],
                        count=v["count"], outlet=outlet, water_density_kg_m3=v["water_density_kg_m3"])
    cg = gas_compliance_m3_pa(gas_volume_m3=v["gas_volume_m3"], polytropic_index=v["polytropic_index"],
                              pressure_pa=v["pressure_pa"])
    scale, aspect, area = outline_scale(v, shape)
    vol_coeff, lam2 = shape_coefficients(shape, aspect)
    d = plate.flexural_rigidity(v["youngs_modulus_pa"], v["thickness_m"], v["poisson_ratio"])
    cp = vol_coeff * scale**6 / d
    rho_h = v["density_kg_m3"] * v["thickness_m"]
    dry = lam2 / (2.0 * math.pi * scale[..., None] ** 2) * np.sqrt(d / rho_h)[..., None]
    if wetted:
        factor = plate.lamb_wet_factor(radius_m=np.sqrt(area / math.pi), surface_density_kg_m2=rho_h,
                                       water_density_kg_m3=v["water_density_kg_m3"])
        modes = dry * np.asarray(factor)[..., None]
    else:
        modes = dry
    rate = cycle_rate_hz(inertance_kg_m4=m, compliance_m3_pa=cg + cp)
    return {"rate_hz": rate, "ring_hz": modes[..., 0], "ring_modes_hz": modes, "dry_ring_hz": dry[..., 0],
            "inertance_kg_m4": m, "gas_compliance_m3_pa": cg, "plate_compliance_m3_pa": cp,
            "rigidity_n_m": d}


def input_quantities(profile: BoatProfile) -> dict[str, Quantity]:
    """Every input of :func:`forward` as a :class:`~popmeter.profile.Quantity`
    (SI value and plus-or-minus tolerance); the tube count is exact."""
    dia = profile.diaphragm
    q = {
        "inner_diameter_m": profile.tubes.inner_diameter_m,
        "tube_length_m": profile.tubes.length_m,
        "count": Quantity(float(profile.tubes.count), 0.0),
        "gas_volume_m3": profile.boiler.gas_volume_m3,
        "polytropic_index": profile.gas.polytropic_index,
        "pressure_pa": profile.gas.pressure_pa,
    }
    if dia.shape == "circle":
        assert dia.diameter_m is not None
        q["diameter_m"] = dia.diameter_m
    else:
        assert dia.width_m is not None and dia.length_m is not None
        q["width_m"] = dia.width_m
        q["length_m"] = dia.length_m
    q.update({
        "thickness_m": dia.thickness_m,
        "youngs_modulus_pa": dia.youngs_modulus_pa,
        "poisson_ratio": dia.poisson_ratio,
        "density_kg_m3": dia.density_kg_m3,
        "water_density_kg_m3": profile.water.density_kg_m3,
    })
    return q


def nominal_values(profile: BoatProfile) -> dict[str, float]:
    """The profile's nominal inputs as the SI dictionary :func:`forward` takes."""
    return {k: q.value for k, q in input_quantities(profile).items()}


def tolerances(profile: BoatProfile) -> dict[str, float]:
    """Plus-or-minus tolerance (SI) of each key of :func:`nominal_values` (0 for the tube count)."""
    return {k: q.tol for k, q in input_quantities(profile).items()}


@dataclass(frozen=True)
class EnginePrediction:
    """The forward model's prediction for one boat (SI units unless the name says otherwise).

    Attributes:
        rate_hz: predicted cycle rate, Hz.
        ring_hz: lowest diaphragm mode, Hz (wet if the profile says ``wetted``).
        ring_modes_hz: the first six mode frequencies, Hz, same wet/dry treatment.
        dry_ring_hz: lowest mode in air, Hz.
        wetted: whether Lamb's water loading was applied.
        inertance_kg_m4: water-column inertance M (all tubes), kg/m^4.
        gas_compliance_m3_pa: gas spring C_g, m^3/Pa.
        plate_compliance_m3_pa: diaphragm C_p, m^3/Pa.
        stiffness_kpa_per_ml: diaphragm volumetric stiffness 1/C_p, kPa/mL.
        rigidity_n_m: flexural rigidity D, N m.
        thickness_m, gas_volume_m3, polytropic_index: the values used.
        end_correction_m: outlet end correction of one tube, m.
        plate_share: C_p / (C_g + C_p), how much of the spring is the diaphragm.
    """

    rate_hz: float
    ring_hz: float
    ring_modes_hz: list[float]
    dry_ring_hz: float
    wetted: bool
    inertance_kg_m4: float
    gas_compliance_m3_pa: float
    plate_compliance_m3_pa: float
    stiffness_kpa_per_ml: float
    rigidity_n_m: float
    thickness_m: float
    gas_volume_m3: float
    polytropic_index: float
    end_correction_m: float
    plate_share: float

    def to_json(self) -> dict[str, Any]:
        """The prediction as a JSON-ready dictionary (same names and units as the attributes)."""
        return asdict(self)


def predict(profile: BoatProfile, *, thickness_m: float | None = None,
            gas_volume_m3: float | None = None, polytropic_index: float | None = None) -> EnginePrediction:
    """Predict cycle rate and diaphragm ring for a boat profile.

    Args:
        profile: the boat.
        thickness_m: diaphragm thickness in m instead of the profile's nominal
            gauge (None: the profile's value). The synthetic-recording
            generator uses it to simulate a thin or thick diaphragm.
        gas_volume_m3: effective gas volume in m^3 instead of the profile's (None: the profile's).
        polytropic_index: instead of the profile's (None: the profile's).

    Returns:
        :class:`EnginePrediction`.
    """
    v = nominal_values(profile)
    if thickness_m is not None:
        v["thickness_m"] = float(thickness_m)
    if gas_volume_m3 is not None:
        v["gas_volume_m3"] = float(gas_volume_m3)
    if polytropic_index is not None:
        v["polytropic_index"] = float(polytropic_index)
    out = forward(v, shape=profile.diaphragm.shape, outlet=profile.tubes.outlet,
                  wetted=profile.diaphragm.wetted)
    cg = float(out["gas_compliance_m3_pa"])
    cp = float(out["plate_compliance_m3_pa"])
    return EnginePrediction(
        rate_hz=float(out["rate_hz"]),
        ring_hz=float(out["ring_hz"]),
        ring_modes_hz=[float(x) for x in np.ravel(out["ring_modes_hz"])],
        dry_ring_hz=float(out["dry_ring_hz"]),
        wetted=profile.diaphragm.wetted,
        inertance_kg_m4=float(out["inertance_kg_m4"]),
        gas_compliance_m3_pa=cg,
        plate_compliance_m3_pa=cp,
        stiffness_kpa_per_ml=PA_PER_M3_TO_KPA_PER_ML / cp,
        rigidity_n_m=float(out["rigidity_n_m"]),
        thickness_m=v["thickness_m"],
        gas_volume_m3=v["gas_volume_m3"],
        polytropic_index=v["polytropic_index"],
        end_correction_m=float(end_correction_m(v["inner_diameter_m"] / 2.0, outlet=profile.tubes.outlet)),
        plate_share=cp / (cg + cp),
    )


# --- sensitivities -----------------------------------------------------------------

#: SI input key -> (profile key as written in the file, file unit, SI-to-file factor)
INPUT_NAMES: dict[str, tuple[str, str, float]] = {
    "inner_diameter_m": ("tubes.inner_diameter_mm", "mm", 1e3),
    "tube_length_m": ("tubes.length_mm", "mm", 1e3),
    "count": ("tubes.count", "", 1.0),
    "gas_volume_m3": ("boiler.gas_volume_ml", "mL", 1e6),
    "polytropic_index": ("gas.polytropic_index", "", 1.0),
    "pressure_pa": ("gas.pressure_kpa", "kPa", 1e-3),
    "diameter_m": ("diaphragm.diameter_mm", "mm", 1e3),
    "width_m": ("diaphragm.width_mm", "mm", 1e3),
    "length_m": ("diaphragm.length_mm", "mm", 1e3),
    "thickness_m": ("diaphragm.thickness_mm", "mm", 1e3),
    "youngs_modulus_pa": ("diaphragm.youngs_modulus_gpa", "GPa", 1e-9),
    "poisson_ratio": ("diaphragm.poisson_ratio", "", 1.0),
    "density_kg_m3": ("diaphragm.density_kg_m3", "kg/m3", 1.0),
    "water_density_kg_m3": ("water.density_kg_m3", "kg/m3", 1.0),
}


def sensitivities(profile: BoatProfile, *, output: str = "rate_hz", step: float = 0.01) -> dict[str, float]:
    """Elasticities of the prediction: percent change of ``output`` per percent change of each input.

    Central differences in the logarithm, ``(ln y(x (1+s)) - ln y(x (1-s))) / (2 ln-step)``.

    Args:
        profile: the boat.
        output: ``"rate_hz"`` (default, the cycle rate) or ``"ring_hz"`` (the lowest ring).
        step: relative step (default 0.01, i.e. +-1 %, small enough for a smooth model).

    Returns:
        ``{profile key: elasticity}``, keys as written in the profile file
        (e.g. ``"tubes.inner_diameter_mm"``). The tube count is treated as continuous.
    """
    if output not in ("rate_hz", "ring_hz"):
        raise ValueError("output must be 'rate_hz' or 'ring_hz'")
    base = nominal_values(profile)
    kw = {"shape": profile.diaphragm.shape, "outlet": profile.tubes.outlet, "wetted": profile.diaphragm.wetted}
    result: dict[str, float] = {}
    for key in base:
        up, down = dict(base), dict(base)
        up[key] = base[key] * (1.0 + step)
        down[key] = base[key] * (1.0 - step)
        y_up = float(forward(up, **kw)[output])
        y_down = float(forward(down, **kw)[output])
        result[INPUT_NAMES[key][0]] = (math.log(y_up) - math.log(y_down)) / (
            math.log1p(step) - math.log1p(-step))
    return result


# --- the `popmeter model` report -------------------------------------------------------


def model_report(profile_path: str | Path, *, json_path: str | Path | None = None) -> None:
    """Print the forward model of a boat profile (rate, ring, sensitivities) and optionally write JSON.

    Used by ``popmeter model B.toml``. The JSON (schema ``popmeter.model/1``)
    holds ``profile`` (name, source), ``prediction`` (:meth:`EnginePrediction.to_json`)
    and ``sensitivities`` (``rate_hz`` and ``ring_hz``, each ``{key: elasticity}``)
    plus ``tolerance_effect_pct`` (the rate's change, in percent, at each input's tolerance).

    Raises:
        ProfileError: the profile is missing or invalid.
    """
    from rich import box
    from rich.console import Console
    from rich.table import Table

    profile = load_profile(profile_path)
    pred = predict(profile)
    s_rate = sensitivities(profile, output="rate_hz")
    s_ring = sensitivities(profile, output="ring_hz")
    nominal = nominal_values(profile)
    tols = tolerances(profile)
    effect = {INPUT_NAMES[k][0]: (100.0 * s_rate[INPUT_NAMES[k][0]] * tols[k] / nominal[k])
              for k in nominal}

    console = Console()
    head = Table(title=f"Model of {profile.name}", show_header=False, box=None, pad_edge=False)
    head.add_column(style="bold")
    head.add_column(justify="right")
    head.add_column()
    head.add_row("cycle rate", f"{pred.rate_hz:.2f}", "Hz")
    wet = "wet, one side" if pred.wetted else "dry"
    head.add_row(f"ring ({wet})", f"{pred.ring_hz:.0f}", "Hz")
    head.add_row("ring overtones", ", ".join(f"{f:.0f}" for f in pred.ring_modes_hz[1:]), "Hz")
    head.add_row("diaphragm stiffness", f"{pred.stiffness_kpa_per_ml:.1f}", "kPa/mL")
    head.add_row("rigidity D", f"{pred.rigidity_n_m * 1e3:.2f}", "mN m")
    head.add_row("inertance M", f"{pred.inertance_kg_m4:.3g}", "kg/m^4")
    head.add_row("gas / diaphragm compliance", f"{pred.gas_compliance_m3_pa * 1e12:.3g} / "
                 f"{pred.plate_compliance_m3_pa * 1e12:.3g}", "mL/MPa")
    console.print(head)

    table = Table(title="Sensitivity: % change of rate and ring per % of input", title_justify="left",
                  box=box.SIMPLE_HEAD, pad_edge=False,
                  caption="rate@tol: how far the rate moves when the input is off by its tolerance",
                  caption_justify="left")
    table.add_column("input", no_wrap=True)
    table.add_column("nominal", justify="right", no_wrap=True)
    table.add_column("+-tol", justify="right")
    table.add_column("rate", justify="right")
    table.add_column("ring", justify="right")
    table.add_column("rate@tol", justify="right")
    for key, value in nominal.items():
        name, unit, factor = INPUT_NAMES[key]
        tol = tols[key] * factor
        table.add_row(name, f"{value * factor:.4g} {unit}".strip(), f"{tol:.3g}" if tol else "-",
                      f"{s_rate[name]:+.2f}", f"{s_ring[name]:+.2f}",
                      f"{effect[name]:+.1f} %" if tol else "-")
    console.print(table)
    console.print(SAFETY_LINE, style="dim")

    if json_path is not None:
        doc = {
            "schema": "popmeter.model/1",
            "profile": {"name": profile.name, "source": profile.source},
            "prediction": pred.to_json(),
            "sensitivities": {"rate_hz": s_rate, "ring_hz": s_ring},
            "tolerance_effect_pct": effect,
            "caution": SAFETY_LINE,
        }
        from popmeter.errors import output_error

        try:  # like `analyze --json`: a missing folder is created
            Path(json_path).parent.mkdir(parents=True, exist_ok=True)
            Path(json_path).write_text(json.dumps(doc, indent=2) + "\n", encoding="utf-8")
        except OSError as error:
            raise output_error(json_path, error) from None
