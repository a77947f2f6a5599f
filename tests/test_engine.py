"""The lumped engine model against published formulas and the worked magnitudes of physics.md."""

from __future__ import annotations

import copy
import json
import math

import numpy as np
import pytest

from popmeter import engine
from popmeter.engine import predict, sensitivities
from popmeter.errors import ProfileError
from popmeter.plate import CIRCLE_LAMBDA2, LAMB_GAMMA, flexural_rigidity
from popmeter.profile import EXAMPLE_PROFILE_RAW, example_profile, parse_profile, write_profile


def _profile(**sections):
    raw = copy.deepcopy(EXAMPLE_PROFILE_RAW)
    for name, table in sections.items():
        if table is None:
            raw.pop(name, None)
        else:
            raw[name] = table
    return parse_profile(raw)


def test_end_corrections_levine_schwinger_and_norris_sheng():
    r = 1.5e-3
    # Levine & Schwinger (1948): unflanged 0.6133 r; Norris & Sheng (1989): flanged 0.8216 r
    assert engine.end_correction_m(r, outlet="unflanged") == pytest.approx(0.6133 * r)
    assert engine.end_correction_m(r, outlet="flanged") == pytest.approx(0.8216 * r)
    m_u = engine.inertance_kg_m4(inner_diameter_m=2 * r, length_m=0.15, outlet="unflanged")
    m_f = engine.inertance_kg_m4(inner_diameter_m=2 * r, length_m=0.15, outlet="flanged")
    area = math.pi * r**2
    assert m_u == pytest.approx(998.0 * (0.15 + 0.6133 * r) / area)
    assert m_f - m_u == pytest.approx(998.0 * (0.8216 - 0.6133) * r / area)
    # tubes in parallel: inertances combine like parallel inductors
    assert engine.inertance_kg_m4(inner_diameter_m=2 * r, length_m=0.15, count=3) == pytest.approx(m_u / 3)


def test_gas_spring_and_column_is_a_helmholtz_resonator():
    # Kinsler et al., Fundamentals of Acoustics (4th ed.), sec. 10.8: omega0 = c sqrt(S / (V L')).
    # An air resonator: neck radius 1 cm, length 5 cm, unflanged outer end; cavity 1 L.
    # Air at 20 C: rho 1.204 kg/m^3, gamma 1.4 (from memory); c^2 = gamma p0 / rho.
    rho, gamma, p0 = 1.204, 1.4, 101325.0
    r, length, volume = 0.01, 0.05, 1e-3
    c = math.sqrt(gamma * p0 / rho)
    assert c == pytest.approx(343.0, abs=1.0)
    s = math.pi * r**2
    l_eff = length + 0.6133 * r
    f_kinsler = c * math.sqrt(s / (volume * l_eff)) / (2 * math.pi)
    m = engine.inertance_kg_m4(inner_diameter_m=2 * r, length_m=length, water_density_kg_m3=rho)
    cg = engine.gas_compliance_m3_pa(gas_volume_m3=volume, polytropic_index=gamma, pressure_pa=p0)
    assert engine.cycle_rate_hz(inertance_kg_m4=m, compliance_m3_pa=cg) == pytest.approx(f_kinsler, rel=1e-12)


def test_engine_with_a_stiff_diaphragm_tends_to_helmholtz():
    # a 5 mm steel plate barely moves: the engine is the water-loaded Helmholtz resonator
    # (Kinsler et al. with the neck fluid of density rho_w and the spring n p0 / V)
    prof = _profile(diaphragm={"diameter_mm": 25.0, "thickness_mm": 5.0, "material": "steel"})
    pred = predict(prof)
    s = math.pi * 1.5e-3**2
    l_eff = 0.150 + 0.6133 * 1.5e-3
    c_fict = math.sqrt(1.0 * 101325.0 / 998.0)
    f = c_fict * math.sqrt(2 * s / (1e-6 * l_eff)) / (2 * math.pi)  # two necks in parallel
    assert pred.plate_share < 1e-4
    assert pred.rate_hz == pytest.approx(f, rel=1e-4)


def test_compliances_add():
    pred = predict(example_profile())
    f = 1 / (2 * math.pi * math.sqrt(pred.inertance_kg_m4
                                       * (pred.gas_compliance_m3_pa + pred.plate_compliance_m3_pa)))
    assert pred.rate_hz == pytest.approx(f)
    # 25 mm brass 0.1 mm: D = E h^3 / (12 (1 - nu^2)), C_p = pi a^6 / (192 D) (Timoshenko & Woinowsky-Krieger)
    d = 110e9 * 1e-12 / (12 * (1 - 0.33**2))
    assert pred.rigidity_n_m == pytest.approx(d)
    assert pred.plate_compliance_m3_pa == pytest.approx(math.pi * 0.0125**6 / (192 * d))
    assert pred.stiffness_kpa_per_ml == pytest.approx(1e-9 / pred.plate_compliance_m3_pa)
    assert 100 < pred.stiffness_kpa_per_ml < 250  # the QC spec example's range in interfaces.md


def test_worked_magnitudes_of_physics_md():
    # physics.md "Typical magnitudes" (common practice): a 30 x 35 mm 0.1 mm brass lid with
    # tubes 3 mm bore, 150 mm long computes to about 8 Hz; a 25 mm round 0.1 mm brass diaphragm
    # with the same tubes to about 16-20 Hz. Assumed here: two tubes (as the interfaces.md
    # example), unflanged, a small gas volume of 0.1 mL, n_poly = 1, p0 = 101.325 kPa.
    boiler = {"gas_volume_ml": 0.1}
    rect = _profile(boiler=boiler, diaphragm={"shape": "rectangle", "width_mm": 30.0, "length_mm": 35.0,
                                              "thickness_mm": 0.1, "material": "brass"})
    circ = _profile(boiler=boiler)
    f_rect = predict(rect).rate_hz
    f_circ = predict(circ).rate_hz
    assert f_rect == pytest.approx(8.0, rel=0.1)
    assert 16.0 <= f_circ <= 20.0
    # ring: several hundred Hz to a few kHz (physics.md)
    assert 300 < predict(rect).ring_hz < 5000 and 300 < predict(circ).ring_hz < 5000


def test_ring_modes_leissa_and_lamb():
    prof = example_profile()
    pred = predict(prof)
    a, h, rho = 0.0125, 1e-4, 8530.0
    d = flexural_rigidity(110e9, h, 0.33)
    # Leissa, NASA SP-160: f = lambda^2 / (2 pi a^2) sqrt(D / (rho h)), lambda^2 = 10.2158, 21.26, ...
    for lam2, f in zip(CIRCLE_LAMBDA2, pred.ring_modes_hz):
        assert f == pytest.approx(lam2 / (2 * math.pi * a**2) * math.sqrt(d / (rho * h)))
    assert len(pred.ring_modes_hz) == 6
    assert pred.ring_hz == pred.ring_modes_hz[0] == pred.dry_ring_hz
    wet = predict(_profile(diaphragm={**EXAMPLE_PROFILE_RAW["diaphragm"], "wetted": True}))
    # Lamb (1920): f_wet = f_dry / sqrt(1 + 0.6689 rho_w a / (rho_s h))
    assert LAMB_GAMMA == 0.6689
    factor = 1 / math.sqrt(1 + 0.6689 * 998.0 * a / (rho * h))
    assert wet.ring_hz == pytest.approx(pred.ring_hz * factor)
    assert wet.dry_ring_hz == pytest.approx(pred.ring_hz)
    assert wet.ring_modes_hz[2] == pytest.approx(pred.ring_modes_hz[2] * factor)
    assert wet.rate_hz == pred.rate_hz


def test_overrides_and_thinner_is_softer():
    prof = example_profile()
    base = predict(prof)
    thin = predict(prof, thickness_m=0.8e-4)
    assert thin.thickness_m == 0.8e-4
    assert thin.stiffness_kpa_per_ml == pytest.approx(base.stiffness_kpa_per_ml * 0.8**3)
    assert thin.ring_hz == pytest.approx(base.ring_hz * 0.8)  # dry ring is proportional to h
    assert thin.rate_hz < base.rate_hz
    more_gas = predict(prof, gas_volume_m3=2e-6, polytropic_index=1.3)
    assert more_gas.gas_compliance_m3_pa == pytest.approx(2e-6 / (1.3 * 101325.0))
    assert more_gas.plate_compliance_m3_pa == base.plate_compliance_m3_pa


def test_sensitivities_match_the_closed_form_elasticities():
    prof = example_profile()
    s = sensitivities(prof)
    pred = predict(prof)
    share = pred.plate_share
    l_over = 0.150 / (0.150 + 0.6133 * 1.5e-3)
    # f ∝ (M (C_g + C_p))^-1/2, M ∝ rho_w (L + dL) / (n r^2), C_p ∝ h^-3 a^6, C_g ∝ V / (n_poly p0)
    assert s["tubes.length_mm"] == pytest.approx(-0.5 * l_over, rel=1e-3)
    assert s["tubes.count"] == pytest.approx(0.5, rel=1e-3)
    assert s["water.density_kg_m3"] == pytest.approx(-0.5, rel=1e-3)
    assert s["boiler.gas_volume_ml"] == pytest.approx(-0.5 * (1 - share), rel=1e-3)
    assert s["diaphragm.thickness_mm"] == pytest.approx(1.5 * share, rel=1e-3)
    assert s["diaphragm.diameter_mm"] == pytest.approx(-3.0 * share, rel=1e-3)
    assert s["diaphragm.density_kg_m3"] == 0.0
    ring = sensitivities(prof, output="ring_hz")
    assert ring["diaphragm.thickness_mm"] == pytest.approx(1.0, rel=1e-3)
    assert ring["diaphragm.diameter_mm"] == pytest.approx(-2.0, rel=1e-3)
    assert ring["boiler.gas_volume_ml"] == 0.0
    with pytest.raises(ValueError):
        sensitivities(prof, output="colour")


def test_forward_is_vectorised():
    prof = example_profile()
    v = engine.nominal_values(prof)
    h = np.array([0.8e-4, 1e-4, 1.2e-4])
    out = engine.forward({**v, "thickness_m": h}, shape="circle", outlet="unflanged", wetted=False)
    assert out["rate_hz"].shape == (3,)
    assert out["ring_modes_hz"].shape == (3, 6)
    assert out["rate_hz"][1] == pytest.approx(predict(prof).rate_hz)
    assert np.all(np.diff(out["rate_hz"]) > 0)


def test_rectangle_prediction_is_consistent_with_the_plate_solver():
    prof = _profile(diaphragm={"shape": "rectangle", "width_mm": 30.0, "length_mm": 35.0,
                               "thickness_mm": 0.1, "material": "brass"})
    pred = predict(prof)
    # Domain monotonicity of the clamped plate (Courant & Hilbert, Methods of Mathematical Physics,
    # vol. 1, ch. VI): the rectangle is softer and rings lower than its inscribed circle
    # (diameter 30 mm) and stiffer and higher than its circumscribed circle.
    d = pred.rigidity_n_m
    rho_h = 8530.0 * 1e-4
    for radius, sign in ((0.015, 1.0), (math.hypot(0.015, 0.0175), -1.0)):
        c_circle = math.pi * radius**6 / (192 * d)
        f_circle = CIRCLE_LAMBDA2[0] / (2 * math.pi * radius**2) * math.sqrt(d / rho_h)
        assert sign * (pred.plate_compliance_m3_pa - c_circle) > 0
        assert sign * (f_circle - pred.ring_hz) > 0
    sw = sensitivities(prof, output="ring_hz")
    assert sw["diaphragm.width_mm"] + sw["diaphragm.length_mm"] == pytest.approx(-2.0, rel=1e-2)


def test_model_report(tmp_path, capsys):
    path = tmp_path / "tug.toml"
    write_profile(example_profile(), path)
    out = tmp_path / "model.json"
    engine.model_report(path, json_path=out)
    text = capsys.readouterr().out
    assert "12.21" in text and "Hz" in text
    # compliances in mL/MPa: C_g = 1 mL / 101.325 kPa = 9.87 mL/MPa; C_p = 6.07e-12 m^3/Pa = 6.07 mL/MPa
    assert "9.87 / 6.07" in text and "mL/MPa" in text
    assert "tubes.inner_diameter_mm" in text
    assert "certify" in text
    doc = json.loads(out.read_text())
    assert doc["schema"] == "popmeter.model/1"
    assert doc["prediction"]["rate_hz"] == pytest.approx(predict(example_profile()).rate_hz)
    assert set(doc["sensitivities"]) == {"rate_hz", "ring_hz"}
    with pytest.raises(ProfileError):
        engine.model_report(tmp_path / "missing.toml")
