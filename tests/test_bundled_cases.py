"""The bundled cases: their physics against handbook formulas, hand-computed points and a real search."""

from __future__ import annotations

import functools
import importlib.util
import math
import time
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_bvp

import tradewise
import tradewise.case
from tradewise.case import bundled_cases, load_case

NAMES = ("cargo-bike-pack", "compression-spring", "footbridge-girder", "heat-sink")
ROOT = Path(__file__).resolve().parent.parent

# An interior design of each case, used for the load, output and perturbation checks.
BASE_DESIGNS = {
    "cargo-bike-pack": {"series": 12, "parallel": 5, "cell": "R21-E50", "cooled_housing": False},
    "compression-spring": {
        "wire_diameter": 2.0,
        "coil_diameter": 16.0,
        "active_coils": 8,
        "material": "music wire",
    },
    "footbridge-girder": {
        "flange_width": 200.0,
        "flange_thickness": 15.0,
        "web_depth": 600.0,
        "web_thickness": 12.0,
        "grade": "S235",
    },
    "heat-sink": {
        "fins": 20,
        "fin_thickness": 1.2,
        "fin_height": 35.0,
        "base_thickness": 6.0,
        "alloy": "6063-T5",
    },
}


@functools.cache
def model_of(name: str):
    """Import a bundled case's model.py as a module of its own."""
    path = bundled_cases()[name].parent / "model.py"
    spec = importlib.util.spec_from_file_location(f"bundled_case_{name.replace('-', '_')}", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


# ------------------------------------------------------------------------------ every case
def test_the_python_model_cases_are_bundled():
    """The cases with a Python model are found by name among the bundled cases."""
    assert set(NAMES) <= set(bundled_cases())


# ------------------------------------------------------------------------- where they are found
def _tree(root: Path, files: list[str]) -> Path:
    """Make the files (empty, or folders where the name ends in /) under root; give the case.py path."""
    for name in files:
        target = root / name
        if name.endswith("/"):
            target.mkdir(parents=True, exist_ok=True)
        else:
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_text("", encoding="utf-8")
    return root / "src" / "tradewise" / "case.py"


def test_a_checkout_lists_the_top_level_cases_folder():
    """In this checkout the bundled cases are exactly the case folders of the top-level cases/."""
    on_disk = {p.parent.name: p.resolve() for p in (ROOT / "cases").glob("*/case.toml")}
    assert set(NAMES) | {"pipe-insulation"} <= set(on_disk)
    assert {name: path.resolve() for name, path in bundled_cases().items()} == on_disk


def test_a_leftover_package_cases_folder_does_not_hide_the_checkout_cases(tmp_path, monkeypatch):
    """A src/tradewise/cases/ left behind by an older checkout, holding only __pycache__ folders,
    does not hide the repository's cases/."""
    fake = _tree(
        tmp_path,
        [
            "pyproject.toml",
            "cases/heat-sink/case.toml",
            "src/tradewise/cases/heat-sink/__pycache__/",
        ],
    )
    monkeypatch.setattr(tradewise.case, "__file__", str(fake))
    assert bundled_cases() == {"heat-sink": tmp_path / "cases" / "heat-sink" / "case.toml"}


def test_an_installed_package_reads_its_own_cases_only(tmp_path, monkeypatch):
    """Installed, the cases inside the package are used, and a cases/ folder two levels up that is
    not a tradewise checkout (no pyproject.toml) is never read."""
    site = tmp_path / "lib" / "site-packages"
    _tree(
        tmp_path,
        ["lib/cases/stray/case.toml", "lib/site-packages/tradewise/cases/heat-sink/case.toml"],
    )
    installed = site / "tradewise" / "case.py"
    monkeypatch.setattr(tradewise.case, "__file__", str(installed))
    assert bundled_cases() == {
        "heat-sink": site / "tradewise" / "cases" / "heat-sink" / "case.toml"
    }
    for leftover in (site / "tradewise" / "cases" / "heat-sink").iterdir():
        leftover.unlink()
    assert bundled_cases() == {}


@pytest.mark.parametrize("name", NAMES)
def test_case_loads_by_name(name):
    """Each case loads by name, has two or three objectives with a reference value, and safety cautions."""
    case = load_case(name)
    assert case.model == "model.py:evaluate"
    assert len(case.objectives) in (2, 3)
    assert all(o.worst is not None for o in case.objectives)
    assert "qualified" in case.cautions
    readme = (case.folder / "README.md").read_text(encoding="utf-8")
    assert "Caution" in readme and "qualified" in readme


@pytest.mark.parametrize("name", NAMES)
def test_model_returns_every_declared_result(name):
    """The model returns every objective and constraint as a finite number, and only declared outputs."""
    case = load_case(name)
    results = model_of(name).evaluate(dict(BASE_DESIGNS[name]))
    required = case.objective_names + case.constraint_names
    for key in required:
        assert isinstance(results[key], float) and math.isfinite(results[key]), key
    assert set(results) == set(required) | set(case.outputs)
    assert all(case.variables[i].contains(v) for i, v in enumerate(BASE_DESIGNS[name].values()))


@pytest.mark.parametrize("name", NAMES)
def test_base_design_lies_inside_the_reference_box(name):
    """Each objective's 'worst' is worse than a reasonable design, so such designs count in the hypervolume."""
    case = load_case(name)
    results = model_of(name).evaluate(dict(BASE_DESIGNS[name]))
    for objective in case.objectives:
        value = results[objective.name]
        assert value > objective.worst if objective.maximise else value < objective.worst


def _perturbed(variable, value):
    if variable.kind == "flag":
        return [not value]
    if variable.kind == "choice":
        return [o for o in variable.options if o != value]
    if variable.kind == "integer":
        return [value + 1 if value < variable.high else value - 1]
    step = 0.05 * (variable.high - variable.low)
    return [value + step if value + step <= variable.high else value - step]


@pytest.mark.parametrize("name", NAMES)
def test_every_variable_moves_a_result(name):
    """Changing any one variable (a choice to each other option, a flag flipped) moves an objective or constraint."""
    case = load_case(name)
    evaluate = model_of(name).evaluate
    base_design = BASE_DESIGNS[name]
    base = evaluate(dict(base_design))
    watched = case.objective_names + case.constraint_names
    for variable in case.variables:
        for value in _perturbed(variable, base_design[variable.name]):
            changed = evaluate({**base_design, variable.name: value})
            moved = [
                k for k in watched if abs(changed[k] - base[k]) > 1e-9 * max(1.0, abs(base[k]))
            ]
            assert moved, f"{variable.name} = {value!r} moved nothing"


# --------------------------------------------------------------------------- cargo-bike-pack
def test_pack_series_parallel_arithmetic():
    """13S4P of 5 Ah, 3.6 V cells: 46.8 V nominal, 54.6 V full, 20 Ah, 936 Wh (series adds volts, parallel adds amp-hours)."""
    m = model_of("cargo-bike-pack")
    cell = m.CELLS["R21-E50"]
    nominal, full, low = m.pack_voltages(13, cell)
    assert (nominal, full, low) == pytest.approx((46.8, 54.6, 41.6))
    assert m.pack_capacity(4, cell) == pytest.approx(20.0)
    assert m.pack_energy(13, 4, cell) == pytest.approx(936.0)
    # 936 Wh x 0.80 usable / 18 Wh/km = 41.6 km
    assert m.usable_range(936.0) == pytest.approx(41.6)


def test_pack_cell_current_is_a_power_balance():
    """Peak power = cell current x parallel cells x series cells x loaded-low cell voltage (P = V I)."""
    m = model_of("cargo-bike-pack")
    cell = m.CELLS["R21-E50"]
    current = m.cell_current(1200.0, 13, 4, cell)
    assert current == pytest.approx(1200.0 / 41.6 / 4)  # 7.2115 A, hand-computed
    assert current * 4 * 13 * cell["low"] == pytest.approx(1200.0)


def test_pack_hand_computed_design():
    """13S4P R21-E50: 362.8 EUR, 4.73 kg, 41.6 km; 7.21 A per cell is over 70 % of 10 A in the plain housing only."""
    m = model_of("cargo-bike-pack")
    design = {"series": 13, "parallel": 4, "cell": "R21-E50", "cooled_housing": False}
    plain = m.evaluate(design)
    # cost: 52 cells x (5.40 + 0.35) + 18 + 1.60 x 13 + 25 = 362.8 EUR
    assert plain["cost"] == pytest.approx(362.8)
    # mass: 52 x (70 + 4 + 6) g + 0.12 kg + 0.45 kg = 4.73 kg
    assert plain["mass"] == pytest.approx(4.73)
    assert plain["range"] == pytest.approx(41.6)
    assert plain["current_use"] == pytest.approx(7.2115385 / 7.0)
    cooled = m.evaluate({**design, "cooled_housing": True})
    assert cooled["current_use"] == pytest.approx(0.72115385)
    assert cooled["cost"] > plain["cost"] and cooled["mass"] > plain["mass"]


def test_pack_sixty_volt_rule_allows_fourteen_nmc_cells():
    """14 lithium-ion cells at 4.2 V reach 58.8 V (within 60 V DC); 15 reach 63 V (common practice: 52 V packs are 14S)."""
    m = model_of("cargo-bike-pack")
    base = {"parallel": 4, "cell": "R21-E50", "cooled_housing": True}
    assert m.evaluate({**base, "series": 14})["full_voltage"] == pytest.approx(58.8)
    assert m.evaluate({**base, "series": 15})["full_voltage"] == pytest.approx(63.0)


# ------------------------------------------------------------------------ compression-spring
SPRING = BASE_DESIGNS["compression-spring"]


def test_spring_hand_computed_design():
    """d = 2 mm, D = 16 mm, N = 8, music wire at 40 N: rate, stress, strength and mass worked by hand (Shigley, from memory)."""
    m = model_of("compression-spring")
    r = m.evaluate(dict(SPRING))
    g, d, coil, n, force = 81_700.0, 2.0, 16.0, 8, 40.0  # MPa, mm, mm, -, N
    # C = D/d = 8; K_B = (4C + 2)/(4C - 3) = 34/29
    index = coil / d
    k_b = (4 * index + 2) / (4 * index - 3)
    assert r["index"] == pytest.approx(8.0, rel=1e-9)
    assert r["bergstrasser_factor"] == pytest.approx(34.0 / 29.0, rel=1e-9)
    # k = G d^4 / (8 D^3 N) = 81700 x 16 / (8 x 4096 x 8) = 4.986572265625 N/mm
    assert r["stiffness"] == pytest.approx(g * d**4 / (8 * coil**3 * n), rel=1e-9)
    assert r["stiffness"] == pytest.approx(4.986572265625, rel=1e-9)
    # tau = K_B 8 F D / (pi d^3) = 1.172414 x 8 x 40 x 16 / (pi x 8) = 238.8422 MPa
    assert r["shear_stress"] == pytest.approx(k_b * 8 * force * coil / (math.pi * d**3), rel=1e-9)
    assert r["shear_stress"] == pytest.approx(238.84217667, rel=1e-9)
    # Sut = 2211 / 2^0.145 = 1999.583 MPa (Shigley Table 10-4, from memory); allowed 45 %
    assert r["tensile_strength"] == pytest.approx(2211.0 / 2.0**0.145, rel=1e-9)
    assert r["allowed_stress"] == pytest.approx(0.45 * 2211.0 / 2.0**0.145, rel=1e-9)
    assert r["stress_use"] == pytest.approx(238.84217667 / 899.81226170, rel=1e-9)
    # mass = rho (pi d^2 / 4)(pi D)(N + 2) = 7.85e-3 g/mm^3 x pi x 16 pi x 10 = 12.39622 g
    assert r["mass"] == pytest.approx(7.85e-3 * math.pi * d**2 / 4 * math.pi * coil * 10, rel=1e-9)
    assert r["mass"] == pytest.approx(12.396223128, rel=1e-9)
    # y = F/k = 8.02154 mm; L_s = d (N + 2) = 20 mm; L_0 = L_s + 1.15 y; OD = D + d = 18 mm
    assert r["deflection"] == pytest.approx(force / 4.986572265625, rel=1e-9)
    assert r["solid_length"] == pytest.approx(20.0, rel=1e-9)
    assert r["free_length"] == pytest.approx(20.0 + 1.15 * force / 4.986572265625, rel=1e-9)
    assert r["outer_diameter"] == pytest.approx(18.0, rel=1e-9)


def test_bergstrasser_factor_at_the_index_limits():
    """K_B = (4C + 2)/(4C - 3) is 18/13 at C = 4 and 50/45 at C = 12, and falls toward 1 as C grows (Shigley)."""
    m = model_of("compression-spring")
    assert m.bergstrasser_factor(4.0) == pytest.approx(18.0 / 13.0, rel=1e-12)
    assert m.bergstrasser_factor(12.0) == pytest.approx(50.0 / 45.0, rel=1e-12)
    values = [m.bergstrasser_factor(c) for c in (4.0, 6.0, 9.0, 12.0, 100.0)]
    assert all(a > b > 1.0 for a, b in zip(values, values[1:], strict=False))


def test_spring_rate_of_springs_in_series():
    """Doubling the active coils halves the rate: the coils act as springs in series (k = G d^4 / 8 D^3 N)."""
    m = model_of("compression-spring")
    assert m.spring_rate(1.5, 12.0, 10, 77_200.0) == pytest.approx(
        m.spring_rate(1.5, 12.0, 5, 77_200.0) / 2, rel=1e-12
    )


def test_stainless_strength_fits_switch_by_wire_size():
    """302 stainless uses A = 1867, m = 0.146 below 2.5 mm and A = 2065, m = 0.263 from 2.5 to 5 mm (Shigley Table 10-4, from memory)."""
    m = model_of("compression-spring")
    stainless = m.MATERIALS["stainless 302"]
    assert m.tensile_strength(stainless, 1.0) == pytest.approx(1867.0, rel=1e-12)
    assert m.tensile_strength(stainless, 3.0) == pytest.approx(2065.0 / 3.0**0.263, rel=1e-12)
    below, above = m.tensile_strength(stainless, 2.4999), m.tensile_strength(stainless, 2.5)
    assert abs(below - above) / below < 0.01  # the two fits nearly meet at 2.5 mm


@pytest.mark.parametrize(
    ("variable", "value", "moves"),
    [
        # thicker wire: more metal, much stiffer (d^4), lower stress, smaller index
        ("wire_diameter", 2.2, {"mass": 1, "stiffness": 1, "stress_use": -1, "index": -1}),
        # wider coils: more metal, softer (D^3), higher stress, larger index and outer diameter
        (
            "coil_diameter",
            18.0,
            {"mass": 1, "stiffness": -1, "stress_use": 1, "index": 1, "outer_diameter": 1},
        ),
        # more coils: more metal, softer, longer; the stress at a given load does not change
        (
            "active_coils",
            9,
            {"mass": 1, "stiffness": -1, "stress_use": 0, "index": 0, "free_length": 1},
        ),
        # 302 stainless: lower G, denser, weaker and allowed a smaller share of its strength
        ("material", "stainless 302", {"mass": 1, "stiffness": -1, "stress_use": 1, "index": 0}),
        # oil-tempered: lower G, same density, weaker wire but a larger allowed share
        ("material", "oil-tempered", {"mass": 0, "stiffness": -1, "index": 0}),
    ],
)
def test_spring_results_move_the_expected_way(variable, value, moves):
    """One variable changed from the base spring moves each result up (1), down (-1) or not at all (0)."""
    m = model_of("compression-spring")
    base = m.evaluate(dict(SPRING))
    changed = m.evaluate({**SPRING, variable: value})
    for key, sign in moves.items():
        difference = changed[key] - base[key]
        if sign == 0:
            assert difference == pytest.approx(0.0, abs=1e-12 * abs(base[key])), key
        else:
            assert np.sign(difference) == sign, key


def test_spring_short_search_gives_a_front():
    """1000 evaluations find >= 15 non-dominated springs, with mass and stiffness both varying, all feasible."""
    result = tradewise.run("compression-spring", evaluations=1000, population=40, seed=1)
    front = result.front.table
    assert len(front) >= 15
    assert front["mass"].max() > 5 * front["mass"].min()
    assert front["stiffness"].max() > 3 * front["stiffness"].min()
    # The lighter spring of two on the front is never the stiffer one.
    ordered = front.sort_values("mass")
    assert np.all(np.diff(ordered["stiffness"].to_numpy()) > 0)
    assert (front["stress_use"] <= 1.0).all() and (front["index"] >= 4.0).all()


# ------------------------------------------------------------------------- footbridge-girder
def test_beam_formulas_match_the_worked_numbers():
    """w = 10 kN/m, L = 6 m, E = 210 GPa, 100 x 200 mm: deflection 12.0536 mm, moment 45 kN m (Roark Table 8.1 / Gere)."""
    m = model_of("footbridge-girder")
    # A rectangle is an I whose web is as wide as its flanges.
    sec = m.section_properties(100.0, 50.0, 100.0, 100.0)
    assert sec["inertia"] == pytest.approx(100.0 * 200.0**3 / 12.0)  # 6.6667e7 mm^4
    deflection = m.midspan_deflection(10.0, 6000.0, 210_000.0, sec["inertia"])  # N/mm, mm, MPa
    assert deflection == pytest.approx(12.0536, abs=5e-4)
    assert deflection < 6000.0 / 360.0  # 16.667 mm, span/360 of IBC Table 1604.3
    assert m.midspan_moment(10.0, 6.0) == pytest.approx(45.0)  # kN m
    assert m.end_shear(10.0, 6.0) == pytest.approx(30.0)  # kN


def test_i_section_inertia_agrees_with_strip_integration():
    """The closed-form I of a built-up section equals the sum of b(y) y^2 dy over thin strips."""
    m = model_of("footbridge-girder")
    bf, tf, hw, tw = 230.0, 17.0, 640.0, 9.0
    h = hw + 2 * tf
    n = 67_400  # 0.01 mm strips, so that strip edges fall on the flange-web joints
    y = (np.arange(n) + 0.5) * h / n - h / 2  # strip midpoints
    width = np.where(np.abs(y) > hw / 2, bf, tw)
    inertia = float(np.sum(width * y**2) * h / n)
    sec = m.section_properties(bf, tf, hw, tw)
    assert sec["inertia"] == pytest.approx(inertia, rel=1e-6)
    assert sec["area"] == pytest.approx(float(np.sum(width) * h / n), rel=1e-6)


def test_girder_hand_computed_design():
    """200x15 flanges, 600x12 web, S235: the section, loads, stress, deflection and cost worked by hand."""
    m = model_of("footbridge-girder")
    r = m.evaluate(dict(BASE_DESIGNS["footbridge-girder"]))
    # A = 2 x 200 x 15 + 600 x 12 = 13 200 mm^2; 103.62 kg/m x 12 m
    assert r["mass"] == pytest.approx(1243.44)
    # I = (200 x 630^3 - 188 x 600^3) / 12 = 783.45e6 mm^4
    assert r["inertia"] == pytest.approx(783.45)
    # w = 1.35 (2.5 x 1.25 + 103.62 x 9.81 / 1000) + 1.5 x 6.25 = 14.9660 kN/m; M = w L^2 / 8
    assert r["design_load"] == pytest.approx(14.966041, rel=1e-6)
    assert r["design_moment"] == pytest.approx(269.38875, rel=1e-6)
    # sigma = M / (I / 315 mm) = 108.313 MPa; 108.313 / 235
    assert r["bending_stress"] == pytest.approx(108.3125, rel=1e-5)
    assert r["bending_use"] == pytest.approx(108.3125 / 235.0, rel=1e-5)
    # 5 x 6.25 N/mm x 12000^4 / (384 x 210000 x 783.45e6) = 10.2568 mm
    assert r["deflection"] == pytest.approx(10.2568, rel=1e-5)
    # flange c/t = 94 / 15 over 14; web 600 / 12 = 50 over 124 (epsilon = 1 for S235)
    assert r["flange_slenderness"] == pytest.approx(94.0 / 15.0 / 14.0)
    assert r["web_slenderness"] == pytest.approx(50.0 / 124.0)
    # 50 <= 72 / 1.2 = 60: no stiffeners; V = w L / 2 = 89.796 kN over 1.2 x 235 x 600 x 12 / sqrt 3
    assert r["stiffener_pairs"] == 0
    assert r["shear_use"] == pytest.approx(89796.25 / 1_172_250.9, rel=1e-5)
    # material 1305.612 + welding 354.288 (6 mm throats) + cutting 145.44 + handling 105 + paint 342.048
    assert r["cost"] == pytest.approx(2252.388)
    # f = pi / (2 x 12^2) sqrt(210e9 x 783.45e-6 / (103.62 + 3125 / 9.81)) = 6.8097 Hz
    assert r["frequency"] == pytest.approx(6.8097, rel=1e-4)


def test_shear_buckling_factor_hand_computed():
    """600 x 5 mm S235 web, stiffeners 600 mm apart: k_tau = 9.34, lambda_w = 1.049872, chi_w = 0.83 / lambda_w (EN 1993-1-5, from memory)."""
    m = model_of("footbridge-girder")
    assert m.shear_buckling_factor(600.0, 5.0, 235.0, 600.0) == pytest.approx(
        0.83 / 1.049872, rel=1e-6
    )
    # A stocky web reaches the plateau chi_w = eta = 1.2.
    assert m.shear_buckling_factor(600.0, 12.0, 235.0, None) == pytest.approx(1.2)


def test_slender_web_gets_stiffeners_and_costs_more_per_kilogram():
    """A web beyond 72 epsilon / eta gets stiffener pairs at most one web depth apart, which add welding."""
    m = model_of("footbridge-girder")
    slender = m.evaluate({**BASE_DESIGNS["footbridge-girder"], "web_thickness": 6.0})
    assert slender["stiffener_pairs"] == math.ceil(12000 / 600) - 1
    stocky = m.evaluate(dict(BASE_DESIGNS["footbridge-girder"]))
    assert slender["mass"] < stocky["mass"]
    assert slender["fabrication_cost"] > stocky["fabrication_cost"]


def test_first_frequency_agrees_with_a_finite_difference_beam():
    """(pi / 2L^2) sqrt(EI/m) matches the lowest eigenvalue of EI w'''' = m w^2 w on a fine grid."""
    m = model_of("footbridge-girder")
    span, ei, mass = 12.0, 1.645245e8, 256.5  # m, N m^2, kg/m
    n = 200
    step = span / (n + 1)
    second = (
        np.diag(-2.0 * np.ones(n)) + np.diag(np.ones(n - 1), 1) + np.diag(np.ones(n - 1), -1)
    ) / step**2
    # With w = w'' = 0 at both ends the fourth derivative is the second difference applied twice.
    omega2 = ei / mass * np.linalg.eigvalsh(second @ second)[0]
    expected = math.sqrt(omega2) / (2 * math.pi)
    assert m.first_frequency(span, ei, 1.0, mass) == pytest.approx(expected, rel=1e-4)


# --------------------------------------------------------------------------------- heat-sink
def test_fin_efficiency_matches_the_worked_numbers():
    """6061-T6 fin, h = 25, t = 2 mm, w = 50 mm, L = 30 mm: m = 12.47752 /m, eta = 0.955771; L_c = 31 mm: 0.952942 (Incropera)."""
    m = model_of("heat-sink")
    assert m.fin_parameter(25.0, 167.0, 0.002, width=0.050) == pytest.approx(12.47752, rel=1e-6)
    assert m.fin_efficiency(25.0, 167.0, 0.002, 0.030, width=0.050) == pytest.approx(
        0.955771, abs=1e-6
    )
    assert m.fin_efficiency(25.0, 167.0, 0.002, 0.031, width=0.050) == pytest.approx(
        0.952942, abs=1e-6
    )


@pytest.mark.parametrize(
    ("ml", "eta"),
    [
        (0.2, 0.986877),
        (0.5, 0.924234),
        (1.0, 0.761594),
        (1.5, 0.603432),
        (2.0, 0.482014),
        (3.0, 0.331685),
    ],
)
def test_fin_efficiency_table(ml, eta):
    """tanh(mL)/(mL) at tabulated mL (reference values computed from the closed form, one calculator page agrees)."""
    m = model_of("heat-sink")
    h, k, t = 40.0, 200.0, 0.001
    length = ml / math.sqrt(2 * h / (k * t))  # thin-fin m = sqrt(2h / (k t))
    assert m.fin_efficiency(h, k, t, length) == pytest.approx(eta, abs=1e-6)


def test_fin_efficiency_agrees_with_solving_the_fin_equation():
    """tanh(mL)/(mL) equals the heat rate from solving theta'' = m^2 theta (adiabatic tip) with scipy, over h P L."""
    m = model_of("heat-sink")
    h, k, t, width, length = 45.0, 209.0, 0.0012, 0.12, 0.04
    mm = m.fin_parameter(h, k, t, width=width)
    x = np.linspace(0.0, length, 50)
    solution = solve_bvp(
        lambda _x, y: np.vstack([y[1], mm**2 * y[0]]),
        lambda ya, yb: np.array([ya[0] - 1.0, yb[1]]),
        x,
        np.ones((2, x.size)),
        tol=1e-8,
    )
    area, perimeter = width * t, 2 * (width + t)
    heat = -k * area * solution.sol(0.0)[1]  # per kelvin of base excess temperature
    assert m.fin_efficiency(h, k, t, length, width=width) == pytest.approx(
        heat / (h * perimeter * length), rel=1e-6
    )


def test_air_properties_are_consistent():
    """Interpolated air properties: Pr = mu cp / k at the table rows, and ideal-gas density at 1 atm within 2 %."""
    m = model_of("heat-sink")
    for temperature in (300.0, 350.0):
        air = m.air_properties(temperature)
        assert air["mu"] * air["cp"] / air["k"] == pytest.approx(air["pr"], rel=5e-3)
        assert air["density"] == pytest.approx(101325.0 / (287.05 * temperature), rel=0.02)
    assert m.air_properties(300.0)["density"] == pytest.approx(1.1614)


def test_channel_nusselt_limits():
    """Stephan's mean Nu falls with x* toward the fully developed 7.541 of isothermal parallel plates (Shah & London, from memory)."""
    m = model_of("heat-sink")
    assert m.channel_nusselt(10.0, 0.7) == pytest.approx(7.541, rel=2e-3)
    values = [m.channel_nusselt(x, 0.7) for x in (1e-4, 1e-3, 1e-2, 1e-1, 1.0)]
    assert all(a > b for a, b in zip(values, values[1:], strict=False))


def test_channel_friction_reaches_plane_poiseuille():
    """For a long channel, 4 f L/D_h x rho V^2/2 equals the exact plane Poiseuille drop 12 mu V L / s^2 (White)."""
    m = model_of("heat-sink")
    mu, rho, velocity, gap, length = 1.94e-5, 1.095, 0.5, 0.003, 20.0
    d_h = 2 * gap
    reynolds = rho * velocity * d_h / mu
    x_plus = length / (d_h * reynolds)
    fanning = m.apparent_friction(x_plus) / reynolds
    drop = 4 * fanning * length / d_h * rho * velocity**2 / 2
    # The remaining excess is the entrance term K(inf) = 0.674 of developing flow.
    exact = 12 * mu * velocity * length / gap**2 + 0.674 * rho * velocity**2 / 2
    assert drop == pytest.approx(exact, rel=2e-3)
    # Near the entrance the boundary-layer term 3.44 / sqrt(x+) dominates.
    assert m.apparent_friction(1e-6) == pytest.approx(3.44 / math.sqrt(1e-6), rel=0.02)


def test_entry_and_exit_losses():
    """No loss without an area change; Borda-Carnot (1 - sigma)^2 = 0.25 and 0.42 (1 - sigma^2) = 0.315 at sigma = 0.5."""
    m = model_of("heat-sink")
    assert m.entry_exit_losses(1.0) == pytest.approx((0.0, 0.0))
    assert m.entry_exit_losses(0.5) == pytest.approx((0.315, 0.25))


def test_spreading_resistance_limits():
    """A small source on a thick, well-cooled plate nears the half-space disc value 8/(3 pi^2 k a); a full-width source has none."""
    m = model_of("heat-sink")
    k, a = 200.0, 0.005
    source = math.pi * a**2
    r = m.spreading_resistance(k, 0.5, source, 1e4 * source, 1e-9)
    # uniform-flux disc on a half-space (from memory)
    assert r == pytest.approx(8 / (3 * math.pi**2 * k * a), rel=0.05)
    assert m.spreading_resistance(k, 0.005, 0.01, 0.01, 0.2) == pytest.approx(0.0, abs=1e-12)
    thin = m.spreading_resistance(k, 0.003, 0.003, 0.012, 0.2)
    thick = m.spreading_resistance(k, 0.012, 0.003, 0.012, 0.2)
    assert thick < thin


def test_heat_sink_hand_computed_design():
    """20 fins 1.2 x 35 mm on a 6 mm 6063 base: gap, velocity, Re, mass and base temperature worked by hand."""
    m = model_of("heat-sink")
    r = m.evaluate(dict(BASE_DESIGNS["heat-sink"]))
    # gap = (100 - 20 x 1.2) / 19 = 4.0 mm; V = 0.010 / (19 x 0.004 x 0.035) = 3.75940 m/s
    assert r["fin_gap"] == pytest.approx(4.0)
    assert r["velocity"] == pytest.approx(3.759398, rel=1e-6)
    # air at 320 K: mu = 194.04e-7 Pa s, rho = 1.09484 kg/m^3; Re = V x 0.008 / (mu / rho) = 1696.94
    assert r["reynolds"] == pytest.approx(1696.94, rel=1e-5)
    # 2700 kg/m^3 x 0.12 m x (0.1 x 0.006 + 20 x 0.0012 x 0.035) m^2 = 466.56 g
    assert r["mass"] == pytest.approx(466.56)
    # 150 W / (1.09484 x 0.010 x 1007.8) W/K = 13.595 K
    assert r["air_rise"] == pytest.approx(13.5946, rel=1e-4)
    assert r["base_temperature"] == pytest.approx(40.0 + 150.0 * r["resistance"])
    # The fins shed most of the heat: resistance lies between 1/(C) and the fins-only bound.
    assert 1 / (1.09484 * 0.010 * 1007.8) < r["resistance"] < 1.0


def test_heat_sink_overlapping_fins_stay_finite():
    """Fins too thick to fit give a negative fin_gap and finite results, so the search sees a graded violation."""
    m = model_of("heat-sink")
    r = m.evaluate({**BASE_DESIGNS["heat-sink"], "fins": 40, "fin_thickness": 3.0})
    assert r["fin_gap"] < 0
    assert all(math.isfinite(v) for v in r.values())


# ------------------------------------------------------------------------ search with defaults
@pytest.mark.slow
@pytest.mark.parametrize("name", NAMES)
def test_default_search_gives_a_broad_front(name):
    """The case's own [search] settings on 2 workers end within a minute with >= 15 front designs and a real trade-off."""

    case = load_case(name)
    start = time.perf_counter()
    result = tradewise.run(case, workers=2)
    elapsed = time.perf_counter() - start
    assert elapsed < 60.0
    assert result.status in {"budget", "stalled", "generations", "exhausted"}
    points = result.front.points()
    assert len(points) >= 15
    span = points.max(axis=0) - points.min(axis=0)
    assert np.all(span > 0)
    scaled = (points - points.min(axis=0)) / span
    # Not collinear: the scaled cloud fills every direction, and with three objectives no pair
    # moves in lockstep.
    n_objectives = points.shape[1]
    if n_objectives == 3:
        correlation = np.corrcoef(scaled.T)
        assert np.all(np.abs(correlation[np.triu_indices(3, 1)]) < 0.99)
    assert np.linalg.matrix_rank(scaled - scaled.mean(axis=0), tol=1e-3) == n_objectives
