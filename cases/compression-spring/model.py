"""Helical compression spring for a latch: wire mass against spring rate under a static load.

Invented scenario: the return spring of a small machine latch, squared-and-ground ends,
40 N static design load, fitting in a bore 25 mm across and a pocket 40 mm deep. The
spring formulas are the handbook ones (Shigley's Mechanical Engineering Design, the
chapter on mechanical springs); the wire data are recalled from its tables (from
memory, see README.md). Results are screening estimates, not a spring design check.
"""

from __future__ import annotations

import math

# ---- invented scenario (N, mm, MPa unless stated) ---------------------------------
LOAD = 40.0  # N, static design load on the spring (invented)
CLASH_ALLOWANCE = 0.15  # fractional overrun to closure xi; Shigley recommends xi >= 0.15
END_COILS = 2  # inactive coils of squared-and-ground ends (Shigley Table 10-1)

#: Spring wires: shear modulus G (MPa), density (kg/m^3), the tensile strength fit
#: Sut = A / d^m (A in MPa mm^m, d in mm) and the share of Sut allowed as static shear
#: stress before set is removed. G and the fits after Shigley Tables 10-5 and 10-4, the
#: allowed shares after Shigley Table 10-6; all from memory. Music wire's G falls
#: slightly with wire size in the table (82.7 to 80.0 GPa); one value is used here.
#: Densities are usual handbook values for carbon and alloy steel and for 302 stainless
#: (from memory). Stainless 302 has three fits by wire size (upper limits in mm).
MATERIALS = {
    "music wire": {
        "shear_modulus": 81_700.0,
        "density": 7850.0,
        "fits": ((math.inf, 2211.0, 0.145),),
        "allowed_share": 0.45,
    },
    "oil-tempered": {
        "shear_modulus": 77_200.0,
        "density": 7850.0,
        "fits": ((math.inf, 1855.0, 0.187),),
        "allowed_share": 0.50,
    },
    "stainless 302": {
        "shear_modulus": 69_000.0,
        "density": 7920.0,
        "fits": ((2.5, 1867.0, 0.146), (5.0, 2065.0, 0.263), (math.inf, 2911.0, 0.478)),
        "allowed_share": 0.35,
    },
    "chrome-vanadium": {
        "shear_modulus": 77_200.0,
        "density": 7850.0,
        "fits": ((math.inf, 2005.0, 0.168),),
        "allowed_share": 0.50,
    },
}


def tensile_strength(material: dict, d: float) -> float:
    """Minimum tensile strength Sut = A / d^m (MPa) of wire ``d`` mm across (Shigley Table 10-4)."""
    for upper, a, m in material["fits"]:
        if d < upper:
            return a / d**m
    raise ValueError(f"no strength fit for d = {d} mm")  # the last fit reaches infinity


def bergstrasser_factor(index: float) -> float:
    """Stress correction K_B = (4C + 2) / (4C - 3) for direct shear and curvature (Shigley)."""
    return (4.0 * index + 2.0) / (4.0 * index - 3.0)


def spring_rate(d: float, coil: float, active: int, shear_modulus: float) -> float:
    """Spring rate k = G d^4 / (8 D^3 N) in N/mm for d and D in mm and G in MPa (Shigley)."""
    return shear_modulus * d**4 / (8.0 * coil**3 * active)


def shear_stress(force: float, d: float, coil: float) -> float:
    """Largest shear stress tau = K_B 8 F D / (pi d^3) in MPa at the inside of the coil (Shigley)."""
    return bergstrasser_factor(coil / d) * 8.0 * force * coil / (math.pi * d**3)


def wire_mass(d: float, coil: float, total: int, density: float) -> float:
    """Mass (g) of ``total`` turns of wire at mean diameter D: rho (pi d^2 / 4)(pi D) N_t."""
    return density * 1e-6 * (math.pi * d**2 / 4.0) * (math.pi * coil) * total


def evaluate(design: dict) -> dict:
    """Mass (g), spring rate (N/mm) and the static checks of one spring design."""
    d = float(design["wire_diameter"])
    coil = float(design["coil_diameter"])
    active = int(design["active_coils"])
    material = MATERIALS[design["material"]]
    total = active + END_COILS

    rate = spring_rate(d, coil, active, material["shear_modulus"])
    stress = shear_stress(LOAD, d, coil)
    strength = tensile_strength(material, d)
    allowed = material["allowed_share"] * strength
    deflection = LOAD / rate
    solid = d * total  # squared-and-ground ends (Shigley Table 10-1)
    return {
        "mass": wire_mass(d, coil, total, material["density"]),
        "stiffness": rate,
        "index": coil / d,
        "stress_use": stress / allowed,
        "outer_diameter": coil + d,
        "free_length": solid + (1.0 + CLASH_ALLOWANCE) * deflection,
        "deflection": deflection,
        "solid_length": solid,
        "shear_stress": stress,
        "allowed_stress": allowed,
        "tensile_strength": strength,
        "bergstrasser_factor": bergstrasser_factor(coil / d),
    }
