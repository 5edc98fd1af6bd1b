"""Battery pack for an electric cargo bike: cost, mass and range from series/parallel cell counts.

Invented scenario: a rear-rack pack for a long-tail cargo bike whose motor controller
draws up to 1200 W from the battery at peak assist. Every cell in the catalog below is
invented (plausible round numbers for cylindrical lithium-ion cells, not any maker's
part), and so are the prices and housing figures. See README.md for the equations and
the limits used.
"""

from __future__ import annotations

#: Invented cell catalog, one row per cell: capacity Ah; nominal, full-charge and
#: loaded-low voltage V; mass g; cost EUR; maximum continuous discharge current A.
_CELL_FIELDS = ("capacity", "nominal", "full", "low", "mass", "cost", "current")
_CELL_ROWS = {
    "R18-P25": (2.5, 3.6, 4.2, 3.2, 45.0, 3.10, 20.0),
    "R18-E35": (3.45, 3.6, 4.2, 3.2, 48.0, 3.90, 8.0),
    "R21-P40": (4.0, 3.6, 4.2, 3.2, 68.0, 4.60, 30.0),
    "R21-E50": (5.0, 3.6, 4.2, 3.2, 70.0, 5.40, 10.0),
    "R26-LFP": (3.3, 3.2, 3.65, 2.9, 85.0, 2.30, 20.0),
}
CELLS = {name: dict(zip(_CELL_FIELDS, row, strict=True)) for name, row in _CELL_ROWS.items()}

#: Housings (invented): a closed plastic shell, or a heavier finned aluminium shell that
#: keeps the cells cooler. ``derating`` is the share of a cell's continuous current rating
#: that may be drawn inside that housing.
HOUSINGS = {
    False: {
        "mass": 0.45,
        "mass_per_cell": 0.006,
        "cost": 25.0,
        "cost_per_cell": 0.0,
        "derating": 0.70,
    },
    True: {
        "mass": 0.85,
        "mass_per_cell": 0.012,
        "cost": 60.0,
        "cost_per_cell": 0.15,
        "derating": 1.00,
    },
}

PEAK_POWER = 1200.0  # W drawn from the battery by the motor controller at peak assist (invented)
ENERGY_PER_KM = 18.0  # Wh/km at the battery, laden cargo bike with assist (invented figure)
USABLE_DEPTH = 0.80  # share of nominal energy used per trip, for cycle life (common practice)
ASSEMBLY_PER_CELL = 0.35  # EUR: holder, nickel strip, spot welds (invented)
INTERCONNECT_MASS = 0.004  # kg per cell: holder and strip (invented)
BMS_COST = 18.0  # EUR, plus BMS_COST_PER_GROUP for each series group (balancing channel; invented)
BMS_COST_PER_GROUP = 1.60
BMS_MASS = 0.12  # kg (invented)


def pack_voltages(series: int, cell: dict) -> tuple[float, float, float]:
    """Nominal, full-charge and loaded-low pack voltage (V) of ``series`` cells in series."""
    return series * cell["nominal"], series * cell["full"], series * cell["low"]


def pack_capacity(parallel: int, cell: dict) -> float:
    """Pack capacity (Ah) of ``parallel`` cells in parallel."""
    return parallel * cell["capacity"]


def pack_energy(series: int, parallel: int, cell: dict) -> float:
    """Nominal pack energy (Wh): series x parallel cells, each capacity x nominal voltage."""
    return series * parallel * cell["capacity"] * cell["nominal"]


def cell_current(power: float, series: int, parallel: int, cell: dict) -> float:
    """Current per cell (A) when the pack delivers ``power`` at its loaded-low voltage.

    The low end of the usable window gives the highest current for a given power; the
    pack current I = P / (S V_low) splits evenly over the ``parallel`` strings.
    """
    return power / (series * cell["low"]) / parallel


def usable_range(
    energy: float, *, depth: float = USABLE_DEPTH, per_km: float = ENERGY_PER_KM
) -> float:
    """Range (km) from nominal energy (Wh), usable depth of discharge and energy per km (Wh/km)."""
    return energy * depth / per_km


def evaluate(design: dict) -> dict:
    """Cost (EUR), mass (kg), range (km) and the electrical checks of one pack design."""
    series = int(design["series"])
    parallel = int(design["parallel"])
    cell = CELLS[design["cell"]]
    housing = HOUSINGS[bool(design["cooled_housing"])]
    n_cells = series * parallel

    nominal, full, low = pack_voltages(series, cell)
    energy = pack_energy(series, parallel, cell)
    current = cell_current(PEAK_POWER, series, parallel, cell)
    allowed = cell["current"] * housing["derating"]

    cost = (
        n_cells * (cell["cost"] + ASSEMBLY_PER_CELL + housing["cost_per_cell"])
        + BMS_COST
        + BMS_COST_PER_GROUP * series
        + housing["cost"]
    )
    mass = (
        n_cells * (cell["mass"] / 1000.0 + INTERCONNECT_MASS + housing["mass_per_cell"])
        + BMS_MASS
        + housing["mass"]
    )
    return {
        "cost": cost,
        "mass": mass,
        "range": usable_range(energy),
        "full_voltage": full,
        "low_voltage": low,
        "current_use": current / allowed,
        "nominal_voltage": nominal,
        "capacity": pack_capacity(parallel, cell),
        "energy": energy,
        "cell_current": current,
        "allowed_current": allowed,
        "n_cells": n_cells,
    }
