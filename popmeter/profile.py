"""Boat profiles: the TOML file that describes one boat design.

A profile gives the tubes, the boiler's gas volume, the diaphragm (outline,
gauge, material) and the gas constants. Files are in practical units (mm, mL,
GPa, kPa); :func:`load_profile` converts everything to SI and validates it,
collecting *every* problem before raising one :class:`~popmeter.errors.ProfileError`.

Tolerance convention: any numeric key ``X`` may carry ``X_tol`` in the same
unit, a plus-or-minus band. The Monte Carlo inversion treats the true value as
uniformly distributed in ``[X - X_tol, X + X_tol]``. A key without ``_tol``
is taken as exact (tolerance 0), except the material constants of a built-in
material, which carry the material's own spread (see :mod:`popmeter.materials`).

The diaphragm thickness is the *nominal* gauge, a prior only: the measured
stiffness comes from the recording.
"""

from __future__ import annotations

import copy
import math
import re
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from popmeter.errors import ProfileError
from popmeter.materials import MATERIALS, canonical_name

WATER_DENSITY_KG_M3 = 998.0
"""Density of water near 20 C, kg/m^3 (physics.md; CRC Handbook, from memory)."""

STANDARD_PRESSURE_PA = 101325.0
"""Standard atmosphere, Pa (ISO 2533)."""


@dataclass(frozen=True)
class Quantity:
    """A value in SI units with a plus-or-minus tolerance (same unit, >= 0).

    The true value is taken to lie anywhere in ``[value - tol, value + tol]``.
    """

    value: float
    tol: float = 0.0

    @property
    def low(self) -> float:
        """Lower end of the tolerance band."""
        return self.value - self.tol

    @property
    def high(self) -> float:
        """Upper end of the tolerance band."""
        return self.value + self.tol

    def scaled(self, factor: float) -> Quantity:
        """The same quantity with value and tolerance multiplied by ``factor``."""
        return Quantity(self.value * factor, self.tol * abs(factor))


@dataclass(frozen=True)
class Tubes:
    """The drain tubes (all identical, in parallel)."""

    count: int
    inner_diameter_m: Quantity
    length_m: Quantity
    """Liquid column length while running, m."""
    outlet: str = "unflanged"
    """``"unflanged"`` (end correction 0.6133 r) or ``"flanged"`` (0.8216 r)."""


@dataclass(frozen=True)
class Boiler:
    """The boiler: its effective gas volume (vapour plus trapped air)."""

    gas_volume_m3: Quantity


@dataclass(frozen=True)
class Diaphragm:
    """The diaphragm: outline, nominal gauge, material constants."""

    shape: str
    """``"circle"`` or ``"rectangle"``."""
    thickness_m: Quantity
    youngs_modulus_pa: Quantity
    poisson_ratio: Quantity
    density_kg_m3: Quantity
    material: str | None
    """Built-in material name, or None when the constants were given."""
    diameter_m: Quantity | None = None
    width_m: Quantity | None = None
    length_m: Quantity | None = None
    wetted: bool = False
    """True when water lies on one side of the diaphragm (its ring drops)."""

    @property
    def short_side_m(self) -> Quantity:
        """Rectangle: the shorter side; circle: the radius (the length scale of the plate formulas)."""
        if self.shape == "circle":
            assert self.diameter_m is not None
            return self.diameter_m.scaled(0.5)
        assert self.width_m is not None and self.length_m is not None
        return self.width_m if self.width_m.value <= self.length_m.value else self.length_m

    @property
    def long_side_m(self) -> Quantity:
        """Rectangle: the longer side; circle: the radius."""
        if self.shape == "circle":
            return self.short_side_m
        assert self.width_m is not None and self.length_m is not None
        return self.length_m if self.width_m.value <= self.length_m.value else self.width_m

    @property
    def area_m2(self) -> float:
        """Nominal area of the free (unclamped) diaphragm, m^2."""
        if self.shape == "circle":
            assert self.diameter_m is not None
            return math.pi * self.diameter_m.value**2 / 4.0
        assert self.width_m is not None and self.length_m is not None
        return self.width_m.value * self.length_m.value


@dataclass(frozen=True)
class Gas:
    """The gas spring constants."""

    polytropic_index: Quantity
    pressure_pa: Quantity


@dataclass(frozen=True)
class Water:
    """The water in the tubes."""

    density_kg_m3: Quantity


@dataclass(frozen=True)
class BoatProfile:
    """A validated boat profile, SI units inside.

    Attributes:
        name: the boat's name.
        tubes, boiler, diaphragm, gas, water: the sections.
        source: the file it came from, or None (built-in or made in code).
        raw: the dictionary as loaded (file units), for writing back or
            embedding in ground truth.
    """

    name: str
    tubes: Tubes
    boiler: Boiler
    diaphragm: Diaphragm
    gas: Gas
    water: Water
    source: str | None = None
    raw: dict[str, Any] = field(default_factory=dict, compare=False, repr=False)

    def with_values(self, *, thickness_m: float | None = None,
                    gas_volume_m3: float | None = None,
                    polytropic_index: float | None = None) -> BoatProfile:
        """A copy with some nominal values replaced (SI; tolerances kept). None keeps a value.

        ``raw`` is not changed: it still holds the file as loaded.
        """
        prof = self
        if thickness_m is not None:
            prof = replace(prof, diaphragm=replace(
                prof.diaphragm, thickness_m=Quantity(float(thickness_m), prof.diaphragm.thickness_m.tol)))
        if gas_volume_m3 is not None:
            prof = replace(prof, boiler=Boiler(Quantity(float(gas_volume_m3), prof.boiler.gas_volume_m3.tol)))
        if polytropic_index is not None:
            prof = replace(prof, gas=replace(
                prof.gas, polytropic_index=Quantity(float(polytropic_index), prof.gas.polytropic_index.tol)))
        return prof


# --- the key table -----------------------------------------------------------
# key -> (kind, SI factor, (min, max) plausible in file units, required, default)
# kind: "num" (float, may carry _tol), "int", "str", "bool".
_REQ = "required"

_SCHEMA: dict[str, dict[str, tuple]] = {
    "tubes": {
        "count": ("int", 1, (1, 20), _REQ, None),
        "inner_diameter_mm": ("num", 1e-3, (0.3, 30.0), _REQ, None),
        "length_mm": ("num", 1e-3, (5.0, 3000.0), _REQ, None),
        "outlet": ("str", None, ("unflanged", "flanged"), False, "unflanged"),
    },
    "boiler": {
        "gas_volume_ml": ("num", 1e-6, (0.001, 2000.0), _REQ, None),
    },
    "diaphragm": {
        "shape": ("str", None, ("circle", "rectangle"), False, "circle"),
        "diameter_mm": ("num", 1e-3, (2.0, 500.0), False, None),
        "width_mm": ("num", 1e-3, (2.0, 500.0), False, None),
        "length_mm": ("num", 1e-3, (2.0, 500.0), False, None),
        "thickness_mm": ("num", 1e-3, (0.005, 5.0), _REQ, None),
        "material": ("str", None, None, False, None),
        "youngs_modulus_gpa": ("num", 1e9, (0.5, 1000.0), False, None),
        "poisson_ratio": ("num", 1.0, (0.0, 0.5), False, None),
        "density_kg_m3": ("num", 1.0, (500.0, 25000.0), False, None),
        "wetted": ("bool", None, None, False, False),
    },
    "gas": {
        "polytropic_index": ("num", 1.0, (0.3, 2.0), False, 1.0),
        "pressure_kpa": ("num", 1e3, (10.0, 2000.0), False, STANDARD_PRESSURE_PA / 1e3),
    },
    "water": {
        "density_kg_m3": ("num", 1.0, (500.0, 2000.0), False, WATER_DENSITY_KG_M3),
    },
    # written by `popmeter calibrate`; informative only, not used by the model
    "calibration": {
        "method": ("str", None, None, False, None),
        "reference_units": ("int", 1, (1, 100000), False, None),
        "polytropic_index_before": ("num", 1.0, (0.0, 10.0), False, None),
        "rate_spread_pct": ("num", 1.0, (0.0, 1000.0), False, None),
    },
}
_SECTIONS_REQUIRED = ("tubes", "boiler", "diaphragm")


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _where(section: str, key: str) -> str:
    return f"[{section}] {key}"


def parse_profile(data: dict[str, Any], *, source: str | None = None) -> BoatProfile:
    """Validate a profile dictionary (file units, as read from TOML) and convert it to SI.

    Args:
        data: the parsed TOML document.
        source: the file path (or another label) used in error messages and
            stored as :attr:`BoatProfile.source`; None for profiles made in code.

    Returns:
        The validated :class:`BoatProfile`.

    Raises:
        ProfileError: with one entry per problem found (unknown or missing key,
            wrong type, negative or implausible value, rectangle without both
            sides, unknown material...).
    """
    label = source if source is not None else "<profile>"
    problems: list[str] = []
    if not isinstance(data, dict):
        raise ProfileError(label, ["the profile must be a TOML table"])

    for key, value in data.items():
        if key == "name":
            if not isinstance(value, str) or not value.strip():
                problems.append("name: must be a non-empty string")
        elif key in _SCHEMA:
            if not isinstance(value, dict):
                problems.append(f"[{key}]: must be a table, got {type(value).__name__}")
        else:
            problems.append(f"unknown key {key!r} (known: name, "
                            + ", ".join(f"[{s}]" for s in _SCHEMA) + ")")
    for section in _SECTIONS_REQUIRED:
        if section not in data:
            problems.append(f"missing section [{section}]")

    values: dict[str, dict[str, Any]] = {}
    for section, keys in _SCHEMA.items():
        table = data.get(section, {})
        if not isinstance(table, dict):
            table = {}
        out: dict[str, Any] = {}
        for key, value in table.items():
            base = key.removesuffix("_tol")
            if base not in keys:
                problems.append(f"{_where(section, key)}: unknown key (known: {', '.join(keys)})")
            elif key != base and keys[base][0] != "num":
                problems.append(f"{_where(section, key)}: {base} takes no tolerance")
            elif key != base and base not in table:
                problems.append(f"{_where(section, key)}: tolerance given without {base}")
        for key, (kind, factor, bounds, required, default) in keys.items():
            if key not in table:
                if required == _REQ and section in data:
                    problems.append(f"{_where(section, key)}: missing")
                if default is not None:
                    out[key] = Quantity(default * factor, 0.0) if kind == "num" else default
                continue
            value = table[key]
            where = _where(section, key)
            if kind == "num":
                tol = table.get(key + "_tol", 0.0)
                ok = True
                if not _is_number(value) or not math.isfinite(value):
                    problems.append(f"{where}: must be a number, got {value!r}")
                    ok = False
                elif not bounds[0] <= value <= bounds[1]:
                    kind_word = "negative" if value < 0 else ("zero" if value == 0 else "implausible")
                    problems.append(f"{where}: {kind_word} value {value!r} (expected "
                                    f"{bounds[0]:g} to {bounds[1]:g})")
                    ok = False
                if not _is_number(tol) or not math.isfinite(tol):
                    problems.append(f"{where}_tol: must be a number, got {tol!r}")
                    ok = False
                elif tol < 0:
                    problems.append(f"{where}_tol: negative tolerance {tol!r}")
                    ok = False
                elif ok and bounds[0] > 0 and tol >= value:
                    problems.append(f"{where}_tol: tolerance {tol!r} is not smaller than the value {value!r}")
                    ok = False
                if ok:
                    out[key] = Quantity(float(value) * factor, float(tol) * factor)
            elif kind == "int":
                if not isinstance(value, int) or isinstance(value, bool):
                    problems.append(f"{where}: must be a whole number, got {value!r}")
                elif not bounds[0] <= value <= bounds[1]:
                    problems.append(f"{where}: value {value!r} out of range {bounds[0]}..{bounds[1]}")
                else:
                    out[key] = value
            elif kind == "str":
                if not isinstance(value, str):
                    problems.append(f"{where}: must be a string, got {value!r}")
                elif bounds is not None and value not in bounds:
                    problems.append(f"{where}: {value!r} is not one of {', '.join(map(repr, bounds))}")
                else:
                    out[key] = value
            elif kind == "bool":
                if not isinstance(value, bool):
                    problems.append(f"{where}: must be true or false, got {value!r}")
                else:
                    out[key] = value
        values[section] = out

    dia = values["diaphragm"]
    dia_table = data.get("diaphragm") if isinstance(data.get("diaphragm"), dict) else {}
    shape = dia.get("shape", "circle")
    if "diaphragm" in data:
        if shape == "circle":
            if "diameter_mm" not in dia_table:
                problems.append("[diaphragm] diameter_mm: missing (needed for shape = \"circle\")")
            for k in ("width_mm", "length_mm"):
                if k in dia_table:
                    problems.append(f"[diaphragm] {k}: only for shape = \"rectangle\" (this one is a circle)")
        elif shape == "rectangle":
            for k in ("width_mm", "length_mm"):
                if k not in dia_table:
                    problems.append(f"[diaphragm] {k}: missing (a rectangle needs both width_mm and length_mm)")
            if "diameter_mm" in dia_table:
                problems.append("[diaphragm] diameter_mm: only for shape = \"circle\" (this one is a rectangle)")

    material_name: str | None = None
    constants = {"youngs_modulus_gpa": "youngs_modulus_pa", "poisson_ratio": "poisson_ratio",
                 "density_kg_m3": "density_kg_m3"}
    if "material" in dia:
        material_name = canonical_name(dia["material"])
        if material_name is None:
            problems.append(f"[diaphragm] material: unknown material {dia['material']!r} "
                            f"(known: {', '.join(sorted(MATERIALS))}; or give youngs_modulus_gpa, "
                            "poisson_ratio and density_kg_m3)")
    elif "diaphragm" in data:
        missing = [k for k in constants if k not in dia_table]
        if missing:
            problems.append("[diaphragm] material: missing (name a built-in material or give "
                            + ", ".join(missing) + ")")

    if problems:
        raise ProfileError(label, problems)

    if material_name is not None:
        mat = MATERIALS[material_name]
        builtin = {
            "youngs_modulus_gpa": Quantity(mat.youngs_modulus_pa, mat.youngs_modulus_tol_pa),
            "poisson_ratio": Quantity(mat.poisson_ratio, mat.poisson_ratio_tol),
            "density_kg_m3": Quantity(mat.density_kg_m3, mat.density_tol_kg_m3),
        }
        for k, q in builtin.items():
            dia.setdefault(k, q)

    tubes = Tubes(count=values["tubes"]["count"],
                  inner_diameter_m=values["tubes"]["inner_diameter_mm"],
                  length_m=values["tubes"]["length_mm"],
                  outlet=values["tubes"]["outlet"])
    diaphragm = Diaphragm(
        shape=shape,
        thickness_m=dia["thickness_mm"],
        youngs_modulus_pa=dia["youngs_modulus_gpa"],
        poisson_ratio=dia["poisson_ratio"],
        density_kg_m3=dia["density_kg_m3"],
        material=material_name,
        diameter_m=dia.get("diameter_mm"),
        width_m=dia.get("width_mm"),
        length_m=dia.get("length_mm"),
        wetted=dia.get("wetted", False),
    )
    name = data.get("name")
    if name is None:
        name = Path(source).stem if source else "unnamed boat"
    return BoatProfile(
        name=name,
        tubes=tubes,
        boiler=Boiler(values["boiler"]["gas_volume_ml"]),
        diaphragm=diaphragm,
        gas=Gas(values["gas"]["polytropic_index"], values["gas"]["pressure_kpa"]),
        water=Water(values["water"]["density_kg_m3"]),
        source=source,
        raw=copy.deepcopy(data),
    )


def load_profile(path: str | Path) -> BoatProfile:
    """Read and validate a boat profile TOML file.

    Args:
        path: the ``.toml`` file.

    Returns:
        The :class:`BoatProfile` in SI units, with ``source`` set to ``str(path)``.

    Raises:
        ProfileError: the file cannot be read, is not valid TOML, or fails
            validation (one entry per problem).
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as error:
        raise ProfileError(str(path), [f"cannot read the file ({error.strerror or error})"]) from None
    except UnicodeDecodeError:
        raise ProfileError(str(path), ["not a text (UTF-8) file"]) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise ProfileError(str(path), [f"not valid TOML: {error}"]) from None
    return parse_profile(data, source=str(path))


EXAMPLE_PROFILE_RAW: dict[str, Any] = {
    "name": "harbour tug, 2 tubes",
    "tubes": {
        "count": 2,
        "inner_diameter_mm": 3.0,
        "inner_diameter_mm_tol": 0.05,
        "length_mm": 150.0,
        "length_mm_tol": 2.0,
        "outlet": "unflanged",
    },
    "boiler": {"gas_volume_ml": 1.0, "gas_volume_ml_tol": 0.1},
    "diaphragm": {
        "shape": "circle",
        "diameter_mm": 25.0,
        "diameter_mm_tol": 0.1,
        "thickness_mm": 0.10,
        "thickness_mm_tol": 0.01,
        "material": "brass",
        "wetted": False,
    },
    "gas": {"polytropic_index": 1.0, "polytropic_index_tol": 0.05, "pressure_kpa": 101.325},
}
"""The invented demo boat (the example of interfaces.md) in file units."""


def example_profile() -> BoatProfile:
    """The built-in demo boat: an invented two-tube harbour tug with a 25 mm brass diaphragm."""
    return parse_profile(copy.deepcopy(EXAMPLE_PROFILE_RAW), source=None)


# --- writing -------------------------------------------------------------------

_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def _toml_key(key: str) -> str:
    return key if _BARE_KEY.match(key) else _toml_string(key)


def _toml_string(text: str) -> str:
    out = ['"']
    for ch in text:
        code = ord(ch)
        if ch == '"':
            out.append('\\"')
        elif ch == "\\":
            out.append("\\\\")
        elif ch == "\n":
            out.append("\\n")
        elif ch == "\t":
            out.append("\\t")
        elif ch == "\r":
            out.append("\\r")
        elif code < 0x20 or code == 0x7F:
            out.append(f"\\u{code:04X}")
        else:
            out.append(ch)
    out.append('"')
    return "".join(out)


def _toml_value(value: Any, where: str) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        text = repr(value)
        if "e" in text and "." not in text.split("e")[0]:
            mantissa, exponent = text.split("e")
            text = f"{mantissa}.0e{exponent}"
        return text
    if isinstance(value, str):
        return _toml_string(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v, where) for v in value) + "]"
    raise TypeError(f"cannot write {where} = {value!r} as TOML")


def _emit_table(lines: list[str], table: dict[str, Any], prefix: str) -> None:
    scalars = [(k, v) for k, v in table.items() if not isinstance(v, dict)]
    tables = [(k, v) for k, v in table.items() if isinstance(v, dict)]
    for key, value in scalars:
        lines.append(f"{_toml_key(key)} = {_toml_value(value, prefix + key)}")
    for key, sub in tables:
        name = prefix + _toml_key(key)
        lines.append("")
        lines.append(f"[{name}]")
        _emit_table(lines, sub, name + ".")


def dumps_toml(data: dict[str, Any], *, comment: str | None = None) -> str:
    """Serialise a dictionary of scalars, lists of scalars and nested tables as TOML text.

    Args:
        data: the document; keys are strings, values bool/int/float/str, lists
            of those, or nested dicts (written as ``[table]`` sections).
        comment: optional text written at the top, each line prefixed ``# ``.
    """
    lines: list[str] = []
    if comment:
        lines.extend(f"# {line}".rstrip() for line in comment.splitlines())
        lines.append("")
    _emit_table(lines, data, "")
    return "\n".join(lines).lstrip("\n") + "\n"


def write_profile(profile_or_raw: BoatProfile | dict[str, Any], path: str | Path, *,
                  comment: str | None = None) -> None:
    """Write a profile (its ``raw`` file-unit dictionary, or a dictionary) as a TOML file.

    Args:
        profile_or_raw: a :class:`BoatProfile` (its ``raw`` is written) or a
            dictionary in file units.
        path: the file to write.
        comment: optional header comment (for example what calibration fitted).
    """
    raw = profile_or_raw.raw if isinstance(profile_or_raw, BoatProfile) else profile_or_raw
    from popmeter.errors import output_error

    try:  # a missing folder is created, as for every other output
        Path(path).parent.mkdir(parents=True, exist_ok=True)
        Path(path).write_text(dumps_toml(raw, comment=comment), encoding="utf-8")
    except OSError as error:
        raise output_error(path, error) from None
