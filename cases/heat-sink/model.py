"""Plate-fin heat sink under a fan-fed duct: thermal resistance, mass and pressure drop from handbook physics.

Invented scenario: a 100 mm x 120 mm heat sink under a 60 mm x 50 mm power module
dissipating 150 W, in 40 degC cabinet air, fed 0.010 m^3/s by a small fan through a
shroud that closes the fin tips so that all air passes between the fins. The fan's
own curve is not modelled: the flow is fixed and the pressure the fan must supply
at that flow is reported. See README.md for the equations, their sources and what is
recalled from memory.
"""

from __future__ import annotations

import math

# ---- invented scenario (SI units) -------------------------------------------------
BASE_WIDTH = 0.100  # m, across the fins
BASE_LENGTH = 0.120  # m, along the air flow (also the fin length)
SOURCE_AREA = 0.060 * 0.050  # m^2, module footprint, centred on the base
HEAT_LOAD = 150.0  # W, rated loss of the module
AMBIENT = 40.0  # degC, air entering the sink
AIR_FLOW = 0.010  # m^3/s through the fin channels
FILM_TEMPERATURE = 320.0  # K, fixed temperature for the air properties (not iterated)

#: Alloys: thermal conductivity W/(m K) and density kg/m^3. Typical handbook values,
#: from memory except 6061-T6 (167 W/(m K), 2700 kg/m^3: Aluminum Association typical).
ALLOYS = {
    "6063-T5": {"k": 209.0, "density": 2700.0},
    "6061-T6": {"k": 167.0, "density": 2700.0},
    "1050A": {"k": 229.0, "density": 2705.0},
    "Cu-ETP": {"k": 390.0, "density": 8930.0},
}

# Air at 1 atm, Incropera Table A.4 rows for 300 K and 350 K (from memory):
# density kg/m^3, specific heat J/(kg K), viscosity Pa s, conductivity W/(m K), Prandtl.
_AIR_300 = (1.1614, 1007.0, 184.6e-7, 26.3e-3, 0.707)
_AIR_350 = (0.9950, 1009.0, 208.2e-7, 30.0e-3, 0.700)


def air_properties(temperature: float) -> dict[str, float]:
    """Air properties at ``temperature`` (K), linear between the 300 K and 350 K table rows.

    Returns density (kg/m^3), cp (J/(kg K)), mu (Pa s), k (W/(m K)) and pr.
    """
    f = (temperature - 300.0) / 50.0
    rho, cp, mu, k, pr = (a + f * (b - a) for a, b in zip(_AIR_300, _AIR_350, strict=True))
    return {"density": rho, "cp": cp, "mu": mu, "k": k, "pr": pr}


def fin_parameter(h: float, k: float, t: float, *, width: float | None = None) -> float:
    """Fin parameter m = sqrt(h P / (k A_c)) in 1/m of a rectangular fin of thickness ``t``.

    With ``width`` (the fin's extent along its base) the perimeter is P = 2 (w + t) and
    A_c = w t; without it the thin-fin limit m = sqrt(2 h / (k t)) is used
    (Incropera, straight fin of uniform section).
    """
    if width is None:
        return math.sqrt(2.0 * h / (k * t))
    return math.sqrt(h * 2.0 * (width + t) / (k * width * t))


def fin_efficiency(
    h: float, k: float, t: float, length: float, *, width: float | None = None
) -> float:
    """Efficiency tanh(mL)/(mL) of a straight fin with an adiabatic tip (Incropera).

    Pass the corrected length L_c = L + t/2 to account for a convective tip.
    """
    ml = fin_parameter(h, k, t, width=width) * length
    return math.tanh(ml) / ml if ml > 0 else 1.0


def channel_nusselt(x_star: float, pr: float) -> float:
    """Mean Nusselt number (on D_h = 2 s) for simultaneously developing laminar flow between
    isothermal parallel plates, Stephan's correlation as given by Shah & London (1978)
    (from memory); ``x_star`` = L / (D_h Re Pr). Tends to 7.55 for long channels.
    """
    return 7.55 + 0.024 * x_star**-1.14 / (1.0 + 0.0358 * pr**0.17 * x_star**-0.64)


def apparent_friction(x_plus: float) -> float:
    """Apparent Fanning friction factor times Re for developing laminar flow between parallel
    plates, Shah's correlation (Shah & London 1978, from memory): fully developed fRe = 24,
    K(inf) = 0.674, C = 2.9e-5; ``x_plus`` = L / (D_h Re).
    """
    root = 3.44 / math.sqrt(x_plus)
    return root + (0.674 / (4.0 * x_plus) + 24.0 - root) / (1.0 + 2.9e-5 / x_plus**2)


def entry_exit_losses(sigma: float) -> tuple[float, float]:
    """Loss coefficients (on the channel velocity) at the entry and exit of the fin array.

    ``sigma`` is the free-area ratio (channel flow area over frontal area). Entry:
    K_c = 0.42 (1 - sigma^2), a fit to Kays & London's contraction data used in the plate-fin
    heat sink literature (from memory). Exit: Borda-Carnot sudden expansion
    K_e = (1 - sigma)^2 (from memory, any fluid mechanics text).
    """
    return 0.42 * (1.0 - sigma**2), (1.0 - sigma) ** 2


def spreading_resistance(
    k: float, thickness: float, source_area: float, plate_area: float, sink_resistance: float
) -> float:
    """Average spreading resistance (K/W) from a central source into a plate cooled on its far face.

    Closed form of Lee, Song, Au & Moran (1995) (from memory) on equivalent circular
    radii a (source) and b (plate); ``sink_resistance`` (K/W) is the resistance from the
    plate's far face to ambient, which sets the Biot number Bi = 1 / (pi k b R_0).
    """
    a = math.sqrt(source_area / math.pi)
    b = math.sqrt(plate_area / math.pi)
    eps = a / b
    tau = thickness / b
    biot = 1.0 / (math.pi * k * b * sink_resistance)
    lam = math.pi + 1.0 / (math.sqrt(math.pi) * eps)
    th = math.tanh(lam * tau)
    phi = (th + lam / biot) / (1.0 + lam / biot * th)
    psi = 0.5 * (1.0 - eps) ** 1.5 * phi
    return psi / (math.sqrt(math.pi) * k * a)


def evaluate(design: dict) -> dict:
    """Resistance (K/W), mass (g), pressure drop (Pa) and the checks of one heat sink design."""
    n = int(design["fins"])
    t = design["fin_thickness"] * 1e-3
    height = design["fin_height"] * 1e-3
    base = design["base_thickness"] * 1e-3
    alloy = ALLOYS[design["alloy"]]
    k_metal, rho_metal = alloy["k"], alloy["density"]

    gap = (BASE_WIDTH - n * t) / (n - 1)
    # Overlapping fins are reported through fin_gap; the physics runs on a tiny gap so
    # that every result stays finite and the search sees a graded violation.
    s = max(gap, 1e-4)
    air = air_properties(FILM_TEMPERATURE)
    nu = air["mu"] / air["density"]

    flow_area = (n - 1) * s * height
    velocity = AIR_FLOW / flow_area
    d_h = 2.0 * s  # parallel plates: the fin height is much larger than the gap
    reynolds = velocity * d_h / nu

    h = channel_nusselt(BASE_LENGTH / (d_h * reynolds * air["pr"]), air["pr"]) * air["k"] / d_h
    corrected = height + t / 2.0
    eta_fin = fin_efficiency(h, k_metal, t, corrected, width=BASE_LENGTH)
    fin_area = n * 2.0 * BASE_LENGTH * corrected
    total_area = fin_area + (n - 1) * s * BASE_LENGTH
    eta_overall = 1.0 - fin_area / total_area * (1.0 - eta_fin)
    capacity = air["density"] * AIR_FLOW * air["cp"]  # W/K
    ntu = h * eta_overall * total_area / capacity
    # An isothermal surface heating a stream: Q = C (T_s - T_in) (1 - exp(-NTU)).
    r_convection = 1.0 / (capacity * (1.0 - math.exp(-ntu)))
    r_conduction = base / (k_metal * BASE_WIDTH * BASE_LENGTH)
    r_spreading = spreading_resistance(
        k_metal, base, SOURCE_AREA, BASE_WIDTH * BASE_LENGTH, r_convection
    )
    resistance = r_spreading + r_conduction + r_convection

    fanning = apparent_friction(BASE_LENGTH / (d_h * reynolds)) / reynolds
    k_entry, k_exit = entry_exit_losses(flow_area / (BASE_WIDTH * height))
    pressure_drop = (
        (k_entry + k_exit + 4.0 * fanning * BASE_LENGTH / d_h) * air["density"] * velocity**2 / 2.0
    )

    mass = rho_metal * BASE_LENGTH * (BASE_WIDTH * base + n * t * height) * 1e3
    return {
        "resistance": resistance,
        "mass": mass,
        "pressure_drop": pressure_drop,
        "fin_gap": gap * 1e3,
        "base_temperature": AMBIENT + HEAT_LOAD * resistance,
        "reynolds": reynolds,
        "velocity": velocity,
        "film_coefficient": h,
        "fin_efficiency": eta_fin,
        "spreading": r_spreading,
        "air_rise": HEAT_LOAD / capacity,
    }
