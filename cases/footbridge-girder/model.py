"""Welded steel plate girder for a short footbridge: mass, fabricated cost and deflection.

Invented scenario: a 12 m simply supported footbridge with a 2.5 m wide timber deck on
two welded I-girders; this model sizes one girder. Its top flange is assumed held
sideways by the deck cross-beams, so lateral-torsional buckling is not checked. Prices
and fabrication rates are invented. See README.md for the equations, the sources and
the limits used. Results are screening estimates, not a design check.
"""

from __future__ import annotations

import math

# ---- invented scenario (N, mm, MPa unless stated) ---------------------------------
SPAN = 12_000.0  # mm
TRIBUTARY = 1.25  # m of deck width carried by one girder
DECK_LOAD = 2.5  # kN/m^2: hardwood deck, surfacing, cross-beams, parapet share (invented)
CROWD_LOAD = 5.0  # kN/m^2: pedestrian crowd load, a user-set value (see README)
GAMMA_G, GAMMA_Q = 1.35, 1.5  # EN 1990 Table A1.2(B) recommended factors (from memory)
GAMMA_M0 = 1.0  # EN 1993-1-1 6.1 recommended values (from memory)
GAMMA_M1 = 1.0
ETA = 1.2  # EN 1993-1-5 5.1 shear area factor for S235 to S460 (from memory)
E = 210_000.0  # MPa, EN 1993-1-1 3.2.6
DENSITY = 7850.0  # kg/m^3, EN 1991-1-1 Table A.4
G = 9.81  # m/s^2

#: Steel grades: nominal yield strength (MPa) for plates up to 40 mm thick
#: (EN 1993-1-1 Table 3.1, from memory) and an invented price factor on S235 plate.
GRADES = {
    "S235": {"fy": 235.0, "price": 1.00},
    "S355": {"fy": 355.0, "price": 1.05},
    "S460": {"fy": 460.0, "price": 1.15},
}

# ---- invented fabrication prices ---------------------------------------------------
PLATE_PRICE = 1.05  # EUR/kg of S235 plate
LABOUR = 55.0  # EUR/h, welder or cutter
DEPOSITION = 3.0  # kg/h of weld metal, manual MAG fillet welding
WELD_HANDLING = 0.04  # h per metre of weld: fit-up, tacking, cleaning
CUT_RATE = 0.9  # EUR per metre of thermal cut, plus CUT_RATE_PER_MM per mm of thickness
CUT_RATE_PER_MM = 0.08
PIECE_HANDLING = 35.0  # EUR per plate: lifting, marking, turning
COATING = 14.0  # EUR/m^2 blast cleaning and paint
STIFFENER_THICKNESS = 10.0  # mm, flats welded both sides of the web (invented detailing)
STIFFENER_HANDLING = 10.0  # EUR per stiffener piece


def section_properties(bf: float, tf: float, hw: float, tw: float) -> dict[str, float]:
    """Area (mm^2), second moment I (mm^4) and elastic modulus W (mm^3) of a doubly symmetric I.

    ``hw`` is the clear web depth between the flanges; I = [bf h^3 - (bf - tw) hw^3] / 12
    with h = hw + 2 tf (parallel-axis result for a built-up I, any mechanics text).
    """
    h = hw + 2.0 * tf
    area = 2.0 * bf * tf + hw * tw
    inertia = (bf * h**3 - (bf - tw) * hw**3) / 12.0
    return {"area": area, "inertia": inertia, "modulus": inertia / (h / 2.0), "depth": h}


def midspan_moment(w: float, span: float) -> float:
    """Largest moment wL^2/8 of a simply supported beam under uniform load (Roark / Gere)."""
    return w * span**2 / 8.0


def end_shear(w: float, span: float) -> float:
    """Largest shear wL/2 of a simply supported beam under uniform load (Roark / Gere)."""
    return w * span / 2.0


def midspan_deflection(w: float, span: float, e: float, inertia: float) -> float:
    """Midspan deflection 5wL^4/(384EI) of a simply supported beam under uniform load (Roark / Gere)."""
    return 5.0 * w * span**4 / (384.0 * e * inertia)


def first_frequency(span: float, e: float, inertia: float, mass_per_length: float) -> float:
    """First bending frequency (Hz) of a simply supported uniform beam, (pi / 2L^2) sqrt(EI/m).

    SI inputs: span m, e Pa, inertia m^4, mass_per_length kg/m (Euler-Bernoulli beam).
    """
    return math.pi / (2.0 * span**2) * math.sqrt(e * inertia / mass_per_length)


def epsilon(fy: float) -> float:
    """EN 1993-1-1 Table 5.2 factor sqrt(235 / fy), fy in MPa."""
    return math.sqrt(235.0 / fy)


def shear_buckling_factor(hw: float, tw: float, fy: float, panel: float | None) -> float:
    """Reduction factor chi_w for web shear buckling, EN 1993-1-5 5.2-5.3 (from memory).

    ``panel`` is the distance between transverse stiffeners (mm), or None for a web
    stiffened only at the supports. Non-rigid end posts; eta = 1.2 (S235 to S460).
    """
    eps = epsilon(fy)
    if panel is None:
        slenderness = hw / (86.4 * tw * eps)
    else:
        ratio = hw / panel
        k_tau = 5.34 + 4.0 * ratio**2 if panel >= hw else 4.0 + 5.34 * ratio**2
        slenderness = hw / (37.4 * tw * eps * math.sqrt(k_tau))
    return ETA if slenderness < 0.83 / ETA else 0.83 / slenderness


def weld_cost(length: float, throat: float) -> float:
    """Cost (EUR) of ``length`` metres of fillet weld with ``throat`` mm: arc time for the
    deposited metal (cross-section throat^2) plus fit-up and cleaning time per metre."""
    metal = DENSITY * (throat * 1e-3) ** 2 * length  # kg
    return LABOUR * (metal / DEPOSITION + WELD_HANDLING * length)


def cut_cost(length: float, thickness: float) -> float:
    """Cost (EUR) of ``length`` metres of thermal cut through ``thickness`` mm of plate."""
    return length * (CUT_RATE + CUT_RATE_PER_MM * thickness)


def evaluate(design: dict) -> dict:
    """Mass (kg), cost (EUR), deflection (mm) and the checks of one girder design."""
    bf, tf = design["flange_width"], design["flange_thickness"]
    hw, tw = design["web_depth"], design["web_thickness"]
    grade = GRADES[design["grade"]]
    fy = grade["fy"]
    eps = epsilon(fy)
    span_m = SPAN / 1000.0

    # Webs too slender to skip the shear buckling check get pairs of intermediate
    # stiffeners at no more than the web depth apart (a detailing rule, common practice).
    stiffened = hw / tw > 72.0 * eps / ETA
    n_pairs = math.ceil(SPAN / hw) - 1 if stiffened else 0
    panel = SPAN / (n_pairs + 1) if stiffened else None
    stiffener_width = max(40.0, min(100.0, (bf - tw) / 2.0 - 10.0))
    stiffener_mass = n_pairs * 2.0 * stiffener_width * STIFFENER_THICKNESS * hw * 1e-9 * DENSITY

    sec = section_properties(bf, tf, hw, tw)
    mass_per_m = sec["area"] * 1e-6 * DENSITY  # kg/m of the plain girder
    mass = mass_per_m * span_m + stiffener_mass

    # kN/m equals N/mm, so the loads go straight into the mm-based beam formulas.
    dead = DECK_LOAD * TRIBUTARY + mass / span_m * G / 1000.0
    live = CROWD_LOAD * TRIBUTARY
    design_load = GAMMA_G * dead + GAMMA_Q * live
    moment = midspan_moment(design_load, SPAN)  # N mm
    shear = end_shear(design_load, SPAN)  # N
    stress = moment / sec["modulus"]
    deflection = midspan_deflection(live, SPAN, E, sec["inertia"])
    shear_resistance = (
        shear_buckling_factor(hw, tw, fy, panel) * fy * hw * tw / (math.sqrt(3.0) * GAMMA_M1)
    )

    outstand = (bf - tw) / 2.0  # weld leg ignored, which errs on the safe side
    throat = max(3.0, 0.5 * tw)  # mm; EN 1993-1-8 4.5.2 minimum 3 mm (from memory)
    stiffener_length = n_pairs * hw * 1e-3  # m of web height covered by stiffener pairs
    welding = weld_cost(4.0 * span_m, throat) + weld_cost(4.0 * stiffener_length, 3.0)
    cutting = sum(cut_cost(2.0 * span_m, t) for t in (tf, tf, tw))
    cutting += cut_cost(2.0 * 2.0 * stiffener_length, STIFFENER_THICKNESS)
    handling = 3 * PIECE_HANDLING + 2 * n_pairs * STIFFENER_HANDLING
    painted = (4.0 * bf + 4.0 * tf + 2.0 * hw - 2.0 * tw) * 1e-3 * span_m  # m^2
    material = mass * PLATE_PRICE * grade["price"]
    cost = material + welding + cutting + handling + COATING * painted

    mass_for_vibration = mass / span_m + DECK_LOAD * TRIBUTARY * 1000.0 / G  # kg/m, no crowd
    return {
        "mass": mass,
        "cost": cost,
        "deflection": deflection,
        "bending_use": stress / (fy / GAMMA_M0),
        "shear_use": shear / shear_resistance,
        "span_ratio": SPAN / deflection,
        "flange_slenderness": outstand / tf / (14.0 * eps),
        "web_slenderness": hw / tw / (124.0 * eps),
        "bending_stress": stress,
        "design_moment": moment / 1e6,
        "design_load": design_load,
        "depth": sec["depth"],
        "inertia": sec["inertia"] / 1e6,
        "stiffener_pairs": n_pairs,
        "frequency": first_frequency(span_m, E * 1e6, sec["inertia"] * 1e-12, mass_for_vibration),
        "material_cost": material,
        "fabrication_cost": cost - material,
    }
