"""Heat loss and installed cost of an insulated outdoor hot-water pipe (invented scenario).

A stand-alone program run by tradewise as a command model:

    python3 pipeloss.py DESIGN.json RESULTS.json

It reads one design (a JSON object: thickness in mm, material, cladding) and
writes a JSON object of results. A design it cannot evaluate makes it print one
line to stderr and exit with status 2. It needs nothing but the Python standard
library. Every fixed number below is invented for the example unless a source
is named; see README.md for the equations and their sources.
"""

from __future__ import annotations

import json
import math
import sys

# --- the invented installation -------------------------------------------------------------
PIPE_OD = 0.0603  # m, DN50 steel pipe (60.3 mm outside diameter)
LENGTH = 60.0  # m of pipe on an outdoor rack between two buildings
WATER = 75.0  # degC, circulating all year
AIR = 8.0  # degC, invented annual mean outdoor temperature
WIND = 3.0  # m/s, invented annual mean wind across the pipe
HOURS = 8760.0  # h/year of circulation
HEAT_PRICE = 0.075  # EUR/kWh of heat, invented

# Insulation: conductivity at about 40 degC mean (W/(m K)), price (EUR/m^3), factor on the
# conductivity when left without cladding outdoors (moisture, weathering). All invented.
MATERIALS = {
    "mineral-wool": {"k": 0.037, "price": 160.0, "unclad": 1.35},
    "pir-foam": {"k": 0.025, "price": 380.0, "unclad": 1.15},
    "phenolic-foam": {"k": 0.022, "price": 520.0, "unclad": 1.15},
}
WASTE = 1.10  # cutting waste on insulation volume
LABOUR_BASE = 14.0  # EUR/m
LABOUR_PER_MM = 0.25  # EUR/m per mm of thickness
CLADDING_PRICE = 32.0  # EUR/m^2 of outer surface (aluminium sheet, fitted)
EMISSIVITY = {True: 0.10, False: 0.90}  # aluminium cladding / plain facing (from memory)

# Air at about 281 K, interpolated between the 250 K and 300 K rows of Incropera's
# table for air at 1 atm (from memory).
AIR_NU = 14.21e-6  # m^2/s kinematic viscosity
AIR_K = 0.02479  # W/(m K)
AIR_PR = 0.712
SIGMA = 5.670374419e-8  # W/(m^2 K^4), Stefan-Boltzmann constant


class DesignError(ValueError):
    """The design file holds something this program cannot evaluate."""


def churchill_bernstein(re: float, pr: float) -> float:
    """Mean Nusselt number of a cylinder in cross flow (Churchill and Bernstein 1977), Re Pr > 0.2."""
    return 0.3 + (0.62 * re**0.5 * pr ** (1 / 3)) / (1 + (0.4 / pr) ** (2 / 3)) ** 0.25 * (
        1 + (re / 282000.0) ** (5 / 8)
    ) ** (4 / 5)


def evaluate(design: dict) -> dict:
    """Results of one design; raises DesignError for a design outside the case."""
    thickness_mm = design.get("thickness")
    material = design.get("material")
    clad = design.get("cladding")
    if isinstance(thickness_mm, bool) or not isinstance(thickness_mm, int | float):
        raise DesignError(f"thickness: got {thickness_mm!r}, expected a number of mm")
    if not 1.0 <= thickness_mm <= 500.0:
        raise DesignError(f"thickness: got {thickness_mm!r} mm, allowed 1 to 500 mm")
    if material not in MATERIALS:
        raise DesignError(f"material: got {material!r}, allowed: {', '.join(MATERIALS)}")
    if not isinstance(clad, bool):
        raise DesignError(f"cladding: got {clad!r}, expected true or false")

    props = MATERIALS[material]
    k = props["k"] * (1.0 if clad else props["unclad"])
    r1 = PIPE_OD / 2
    r2 = r1 + thickness_mm / 1000.0
    d2 = 2 * r2
    # Conduction through the insulation shell, per metre of pipe (cylinder wall).
    r_shell = math.log(r2 / r1) / (2 * math.pi * k)
    # Wind on the outside: forced convection (Churchill-Bernstein) plus linearised radiation to
    # surroundings at air temperature; the radiation term depends on the surface temperature,
    # so the surface temperature is found by fixed-point iteration.
    re = WIND * d2 / AIR_NU
    h_conv = churchill_bernstein(re, AIR_PR) * AIR_K / d2
    eps = EMISSIVITY[clad]
    t_air = AIR + 273.15
    t_surface = t_air + 1.0
    for _ in range(100):
        h_rad = eps * SIGMA * (t_surface**2 + t_air**2) * (t_surface + t_air)
        r_film = 1.0 / ((h_conv + h_rad) * math.pi * d2)
        q = (WATER - AIR) / (r_shell + r_film)  # W per metre
        new = t_air + q * r_film
        if abs(new - t_surface) < 1e-10:
            t_surface = new
            break
        t_surface = new

    volume = math.pi / 4 * (d2**2 - PIPE_OD**2) * LENGTH
    cost = (
        volume * WASTE * props["price"]
        + (LABOUR_BASE + LABOUR_PER_MM * thickness_mm) * LENGTH
        + (CLADDING_PRICE * math.pi * d2 * LENGTH if clad else 0.0)
    )
    energy_mwh = q * LENGTH * HOURS / 1e6
    return {
        "cost": cost,
        "heat_loss": energy_mwh,
        "outer_diameter": d2 * 1000.0,
        "heat_per_metre": q,
        "surface_temperature": t_surface - 273.15,
        "film_coefficient": h_conv + h_rad,
        "effective_conductivity": k,
        "heat_cost": energy_mwh * 1000.0 * HEAT_PRICE,
    }


def main(argv: list[str]) -> int:
    if len(argv) != 3:
        print("usage: pipeloss.py DESIGN.json RESULTS.json", file=sys.stderr)
        return 2
    try:
        with open(argv[1], encoding="utf-8") as handle:
            design = json.load(handle)
        if not isinstance(design, dict):
            raise DesignError(f"expected a JSON object, got a JSON {type(design).__name__}")
        results = evaluate(design)
    except (OSError, ValueError) as exc:  # DesignError and json's decoding error are ValueErrors
        print(f"pipeloss: {argv[1]}: {exc}", file=sys.stderr)
        return 2
    with open(argv[2], "w", encoding="utf-8") as handle:
        json.dump(results, handle, indent=1)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
