"""Boat profiles and built-in materials: loading, validation, SI conversion, TOML writing."""

from __future__ import annotations

import copy
import math
import tomllib

import pytest

from popmeter.errors import PopmeterError, ProfileError
from popmeter.materials import MATERIALS, canonical_name, get_material
from popmeter.profile import (
    EXAMPLE_PROFILE_RAW,
    BoatProfile,
    Quantity,
    dumps_toml,
    example_profile,
    load_profile,
    parse_profile,
    write_profile,
)

EXAMPLE_TOML = """\
name = "harbour tug, 2 tubes"

[tubes]
count = 2
inner_diameter_mm = 3.0
inner_diameter_mm_tol = 0.05
length_mm = 150.0            # liquid column length while running
length_mm_tol = 2.0
outlet = "unflanged"         # or "flanged"

[boiler]
gas_volume_ml = 1.0
gas_volume_ml_tol = 0.1

[diaphragm]
shape = "circle"             # "circle" | "rectangle"
diameter_mm = 25.0           # circle
thickness_mm = 0.10
thickness_mm_tol = 0.01
material = "brass"           # a built-in name, or give the constants:
wetted = false               # true: water on one side (ring drops)

[gas]
polytropic_index = 1.0
polytropic_index_tol = 0.05
pressure_kpa = 101.325
"""


def _raw() -> dict:
    return copy.deepcopy(EXAMPLE_PROFILE_RAW)


def _problems(data: dict) -> list[str]:
    with pytest.raises(ProfileError) as info:
        parse_profile(data, source="boat.toml")
    assert str(info.value).startswith("boat.toml: ")
    return info.value.problems


# --- materials ------------------------------------------------------------------


def test_materials_match_the_handbook_table_in_physics_md():
    # typical handbook values (ASM Handbook Vols. 1 and 2, from memory), as tabulated in physics.md
    expected = {
        "brass": (110e9, 0.33, 8530), "tinplate": (200e9, 0.29, 7850), "copper": (117e9, 0.34, 8940),
        "aluminium": (69e9, 0.33, 2700), "stainless_304": (193e9, 0.29, 8000),
    }
    assert set(expected) == set(MATERIALS)
    for name, (e, nu, rho) in expected.items():
        mat = MATERIALS[name]
        assert mat.youngs_modulus_pa == pytest.approx(e)
        assert mat.poisson_ratio == pytest.approx(nu)
        assert mat.density_kg_m3 == pytest.approx(rho)
        assert "Handbook" in mat.source
        # spreads are a few percent at most
        assert 0 < mat.youngs_modulus_tol_pa / e <= 0.06


def test_material_aliases():
    assert canonical_name("Stainless Steel 304") == "stainless_304"
    assert canonical_name("aluminum") == "aluminium"
    assert canonical_name("steel") == "tinplate"
    assert canonical_name("unobtainium") is None
    assert get_material("BRASS").name == "brass"
    with pytest.raises(KeyError, match="known: aluminium, brass"):
        get_material("wood")


# --- loading --------------------------------------------------------------------


def test_interfaces_example_loads_in_si(tmp_path):
    path = tmp_path / "tug.toml"
    path.write_text(EXAMPLE_TOML)
    prof = load_profile(path)
    assert isinstance(prof, BoatProfile)
    assert prof.name == "harbour tug, 2 tubes"
    assert prof.source == str(path)
    assert prof.tubes.count == 2
    assert prof.tubes.inner_diameter_m == Quantity(pytest.approx(3.0e-3), pytest.approx(5e-5))
    assert prof.tubes.length_m.value == pytest.approx(0.150)
    assert prof.boiler.gas_volume_m3.value == pytest.approx(1e-6)
    assert prof.boiler.gas_volume_m3.tol == pytest.approx(1e-7)
    assert prof.diaphragm.shape == "circle"
    assert prof.diaphragm.diameter_m.value == pytest.approx(0.025)
    assert prof.diaphragm.short_side_m.value == pytest.approx(0.0125)
    assert prof.diaphragm.thickness_m == Quantity(pytest.approx(1e-4), pytest.approx(1e-5))
    # the built-in material's constants and spread
    assert prof.diaphragm.material == "brass"
    assert prof.diaphragm.youngs_modulus_pa.value == pytest.approx(110e9)
    assert prof.diaphragm.youngs_modulus_pa.tol > 0
    assert prof.gas.pressure_pa.value == pytest.approx(101325.0)
    assert prof.water.density_kg_m3.value == pytest.approx(998.0)
    assert prof.diaphragm.wetted is False
    assert prof.raw["tubes"]["length_mm"] == 150.0
    # same as the built-in example
    assert example_profile().tubes == prof.tubes
    assert example_profile().source is None


def test_defaults_and_material_override():
    raw = _raw()
    del raw["gas"]
    raw["diaphragm"]["youngs_modulus_gpa"] = 115.0
    prof = parse_profile(raw)
    assert prof.gas.polytropic_index.value == 1.0
    assert prof.gas.pressure_pa.value == pytest.approx(101325.0)
    assert prof.diaphragm.youngs_modulus_pa == Quantity(pytest.approx(115e9), 0.0)
    assert prof.diaphragm.density_kg_m3.value == pytest.approx(8530.0)  # still the brass value


def test_constants_without_material():
    raw = _raw()
    del raw["diaphragm"]["material"]
    raw["diaphragm"].update(youngs_modulus_gpa=100.0, poisson_ratio=0.3, density_kg_m3=8000.0)
    prof = parse_profile(raw)
    assert prof.diaphragm.material is None
    assert prof.diaphragm.youngs_modulus_pa.value == pytest.approx(100e9)


def test_rectangle():
    raw = _raw()
    raw["diaphragm"] = {"shape": "rectangle", "width_mm": 35.0, "length_mm": 30.0,
                        "thickness_mm": 0.1, "material": "tinplate"}
    prof = parse_profile(raw)
    assert prof.diaphragm.short_side_m.value == pytest.approx(0.030)
    assert prof.diaphragm.long_side_m.value == pytest.approx(0.035)
    assert prof.diaphragm.area_m2 == pytest.approx(0.030 * 0.035)


def test_with_values_replaces_nominals_and_keeps_tolerances():
    prof = example_profile().with_values(thickness_m=8e-5, gas_volume_m3=2e-6, polytropic_index=1.2)
    assert prof.diaphragm.thickness_m == Quantity(8e-5, pytest.approx(1e-5))
    assert prof.boiler.gas_volume_m3.value == 2e-6
    assert prof.gas.polytropic_index.value == 1.2


# --- validation: one line per problem ---------------------------------------------------


def test_every_problem_reported_at_once():
    raw = _raw()
    raw["colour"] = "red"
    raw["tubes"]["bore_mm"] = 3.0
    del raw["tubes"]["length_mm"]
    raw["tubes"]["inner_diameter_mm"] = -3.0
    raw["boiler"]["gas_volume_ml"] = "one"
    raw["diaphragm"]["material"] = "wood"
    problems = _problems(raw)
    text = "\n".join(problems)
    assert len(problems) >= 6
    assert "unknown key 'colour'" in text
    assert "[tubes] bore_mm: unknown key" in text
    assert "[tubes] length_mm: missing" in text
    assert "[tubes] inner_diameter_mm: negative value -3.0" in text
    assert "[boiler] gas_volume_ml: must be a number" in text
    assert "[diaphragm] material: unknown material 'wood'" in text


def test_rectangle_without_both_sides():
    raw = _raw()
    raw["diaphragm"] = {"shape": "rectangle", "width_mm": 30.0, "thickness_mm": 0.1, "material": "brass"}
    problems = _problems(raw)
    assert problems == ["[diaphragm] length_mm: missing (a rectangle needs both width_mm and length_mm)"]


def test_circle_without_diameter_and_with_sides():
    raw = _raw()
    del raw["diaphragm"]["diameter_mm"]
    del raw["diaphragm"]["diameter_mm_tol"]
    raw["diaphragm"]["width_mm"] = 30.0
    text = "\n".join(_problems(raw))
    assert "diameter_mm: missing" in text
    assert "width_mm: only for shape" in text


@pytest.mark.parametrize(
    "section,key,value,fragment",
    [
        ("diaphragm", "thickness_mm", 0.0, "zero value"),
        ("diaphragm", "thickness_mm", 3000.0, "implausible value"),
        ("diaphragm", "poisson_ratio", 0.7, "implausible value"),
        ("tubes", "count", 2.5, "whole number"),
        ("tubes", "count", 0, "out of range"),
        ("tubes", "outlet", "bell", "not one of"),
        ("diaphragm", "shape", "hexagon", "not one of"),
        ("diaphragm", "wetted", "yes", "true or false"),
        ("gas", "polytropic_index", 5.0, "implausible"),
        ("tubes", "length_mm_tol", -1.0, "negative tolerance"),
        ("tubes", "length_mm_tol", 200.0, "not smaller than the value"),
        ("tubes", "count_tol", 1, "takes no tolerance"),
        ("gas", "pressure_kpa", float("nan"), "must be a number"),
    ],
)
def test_bad_values(section, key, value, fragment):
    raw = _raw()
    raw.setdefault(section, {})[key] = value
    problems = _problems(raw)
    assert any(fragment in p and f"[{section}] {key.removesuffix('_tol')}" in p for p in problems), problems


def test_missing_sections_and_tolerance_without_value():
    raw = {"name": "x", "diaphragm": {"thickness_mm": 0.1, "diameter_mm": 20.0, "material": "brass",
                                      "wetted": False}, "gas": {"pressure_kpa_tol": 1.0}}
    text = "\n".join(_problems(raw))
    assert "missing section [tubes]" in text
    assert "missing section [boiler]" in text
    assert "[gas] pressure_kpa_tol: tolerance given without pressure_kpa" in text


def test_load_errors_name_the_file(tmp_path):
    missing = tmp_path / "nope.toml"
    with pytest.raises(ProfileError, match="nope.toml: cannot read the file"):
        load_profile(missing)
    bad = tmp_path / "bad.toml"
    bad.write_text("[tubes\ncount = 2\n")
    with pytest.raises(ProfileError, match="bad.toml: not valid TOML"):
        load_profile(bad)
    # ProfileError is a PopmeterError with exit code 2
    assert issubclass(ProfileError, PopmeterError) and ProfileError.exit_code == 2


# --- writing ---------------------------------------------------------------------------


def test_write_profile_round_trips(tmp_path):
    prof = example_profile()
    path = tmp_path / "copy.toml"
    write_profile(prof, path, comment="calibrated copy\nfitted: nothing")
    text = path.read_text()
    assert text.startswith("# calibrated copy\n# fitted: nothing\n")
    again = load_profile(path)
    assert again.raw == prof.raw
    assert again.tubes == prof.tubes and again.diaphragm == prof.diaphragm


def test_toml_emitter_against_tomllib():
    # the reference parser is Python's tomllib (TOML 1.0)
    doc = {
        "name": 'quote " backslash \\ tab \t newline \n unicode \u00e9 ctrl \x01',
        "ints": [1, -2, 3], "flag": True, "tiny": 1e-12, "big": 1e21, "neg": -0.5,
        "inf": math.inf, "odd key": 1,
        "section": {"a": 1.5, "nested": {"b": "c", "f": False}},
    }
    back = tomllib.loads(dumps_toml(doc))
    assert back == doc


def test_toml_emitter_rejects_unsupported_values():
    with pytest.raises(TypeError, match="cannot write x"):
        dumps_toml({"x": object()})
