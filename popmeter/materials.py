"""Built-in diaphragm materials.

Each material carries Young's modulus E (Pa), Poisson's ratio nu and density
rho (kg/m^3), each with a plus-or-minus spread that the Monte Carlo inversion
draws from (uniformly, like every profile tolerance). A boat profile names one
of these or gives the constants itself (``youngs_modulus_gpa``,
``poisson_ratio``, ``density_kg_m3``); a constant given in the profile
overrides the built-in value.

Sources (typical room-temperature handbook values, rounded; quoted from
memory, not copied from a table, so the spreads below are deliberately a few
percent wide -- handbooks differ by about that much, e.g. brass 110-117 GPa):

- ASM Handbook, Vol. 2, *Properties and Selection: Nonferrous Alloys and
  Special-Purpose Materials* (ASM International, 1990): brass 70/30
  (cartridge brass, C26000), copper (C11000), aluminium (1100/3003 sheet).
- ASM Handbook, Vol. 1, *Properties and Selection: Irons, Steels, and
  High-Performance Alloys* (ASM International, 1990): low-carbon steel (the
  base of tinplate) and austenitic stainless steel 304.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Material:
    """Elastic constants of a diaphragm material (SI units).

    Attributes:
        name: canonical name used in profiles.
        youngs_modulus_pa: Young's modulus E in Pa.
        youngs_modulus_tol_pa: plus-or-minus spread of E in Pa.
        poisson_ratio: Poisson's ratio nu (dimensionless).
        poisson_ratio_tol: plus-or-minus spread of nu.
        density_kg_m3: density in kg/m^3.
        density_tol_kg_m3: plus-or-minus spread of the density in kg/m^3.
        source: the handbook the values come from.
    """

    name: str
    youngs_modulus_pa: float
    youngs_modulus_tol_pa: float
    poisson_ratio: float
    poisson_ratio_tol: float
    density_kg_m3: float
    density_tol_kg_m3: float
    source: str


_ASM2 = "ASM Handbook Vol. 2 (1990), typical values, from memory"
_ASM1 = "ASM Handbook Vol. 1 (1990), typical values, from memory"

#: The built-in materials, by canonical name. Spreads: E +-4 % (handbooks
#: differ by a few percent), nu +-0.02, density +-1 % (common practice, no
#: source for the spreads).
MATERIALS: dict[str, Material] = {
    "brass": Material("brass", 110e9, 4.4e9, 0.33, 0.02, 8530.0, 85.0, _ASM2 + " (C26000, 70/30)"),
    "tinplate": Material("tinplate", 200e9, 8e9, 0.29, 0.02, 7850.0, 78.0,
                         _ASM1 + " (low-carbon steel)"),
    "copper": Material("copper", 117e9, 4.7e9, 0.34, 0.02, 8940.0, 89.0, _ASM2 + " (C11000)"),
    "aluminium": Material("aluminium", 69e9, 2.8e9, 0.33, 0.02, 2700.0, 27.0,
                          _ASM2 + " (1100/3003)"),
    "stainless_304": Material("stainless_304", 193e9, 7.7e9, 0.29, 0.02, 8000.0, 80.0,
                              _ASM1 + " (AISI 304)"),
}

#: Other spellings accepted in profiles.
ALIASES: dict[str, str] = {
    "steel": "tinplate",
    "low_carbon_steel": "tinplate",
    "tin_plate": "tinplate",
    "aluminum": "aluminium",
    "stainless": "stainless_304",
    "stainless304": "stainless_304",
    "ss304": "stainless_304",
    "stainless_steel_304": "stainless_304",
    "brass_70_30": "brass",
}


def canonical_name(name: str) -> str | None:
    """Canonical material name for ``name`` (case, spaces and hyphens ignored), or None."""
    key = name.strip().lower().replace("-", "_").replace(" ", "_").replace("/", "_")
    key = ALIASES.get(key, key)
    return key if key in MATERIALS else None


def get_material(name: str) -> Material:
    """The built-in :class:`Material` called ``name`` (aliases accepted).

    Raises:
        KeyError: if the name is not a built-in material; the message lists the known names.
    """
    key = canonical_name(name)
    if key is None:
        raise KeyError(f"unknown material {name!r}; known: {', '.join(sorted(MATERIALS))}")
    return MATERIALS[key]
