"""Published test problems with known fronts, written as case folders of any size, for the surrogate checks.

ZDT1 and ZDT2 (Zitzler, Deb and Thiele 2000), DTLZ2 (Deb, Thiele, Laumanns and Zitzler 2002) and
BNH (Binh and Korn 1997, as restated in Deb 2001; from memory). Each problem gives the exact
hypervolume of its Pareto front with the objectives normalised by the front's ideal and nadir
points and the reference point 1.1 in each (ZDT1 2/3 + 1.1^2 - 1, ZDT2 1/3 + 1.1^2 - 1, DTLZ2
1.1^3 - pi/6; BNH from 20,001 points of its analytic front).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import moocore
import numpy as np


@dataclass(frozen=True)
class Problem:
    name: str
    ideal: tuple[float, ...]
    nadir: tuple[float, ...]
    exact: float  # hypervolume of the whole front, normalised, reference 1.1

    def ratio(self, points: np.ndarray) -> float:
        """Hypervolume of ``points`` (normalised as the exact one) over the exact front's."""
        if not len(points):
            return 0.0
        ideal, nadir = np.asarray(self.ideal), np.asarray(self.nadir)
        scaled = (np.asarray(points, float) - ideal) / (nadir - ideal)
        ref = np.full(scaled.shape[1], 1.1)
        scaled = scaled[np.all(scaled < ref, axis=1)]
        return float(moocore.hypervolume(scaled, ref=ref)) / self.exact if len(scaled) else 0.0


def _bnh_exact() -> float:
    t = np.linspace(0.0, 3.0, 10001)
    first = np.column_stack([8 * t**2, 2 * (t - 5) ** 2])
    x = np.linspace(3.0, 5.0, 10001)
    second = np.column_stack([4 * x**2 + 36, (x - 5) ** 2 + 4])
    front = (np.vstack([first, second]) - [0.0, 4.0]) / [136.0, 46.0]
    return float(moocore.hypervolume(front, ref=[1.1, 1.1]))


PROBLEMS = {
    "zdt1": Problem("zdt1", (0.0, 0.0), (1.0, 1.0), 2 / 3 + 1.1**2 - 1),
    "zdt2": Problem("zdt2", (0.0, 0.0), (1.0, 1.0), 1 / 3 + 1.1**2 - 1),
    "dtlz2": Problem("dtlz2", (0.0, 0.0, 0.0), (1.0, 1.0, 1.0), 1.1**3 - math.pi / 6),
    "bnh": Problem("bnh", (0.0, 4.0), (136.0, 50.0), _bnh_exact()),
}

_MODELS = {
    "zdt1": """
import math
def evaluate(d):
    x = [d[f"x{i}"] for i in range(1, {n} + 1)]
    g = 1.0 + 9.0 * sum(x[1:]) / (len(x) - 1)
    return {"f1": x[0], "f2": g * (1.0 - math.sqrt(x[0] / g))}
""",
    "zdt2": """
def evaluate(d):
    x = [d[f"x{i}"] for i in range(1, {n} + 1)]
    g = 1.0 + 9.0 * sum(x[1:]) / (len(x) - 1)
    return {"f1": x[0], "f2": g * (1.0 - (x[0] / g) ** 2)}
""",
    "dtlz2": """
import math
def evaluate(d):
    x = [d[f"x{i}"] for i in range(1, {n} + 1)]
    g = sum((v - 0.5) ** 2 for v in x[2:])
    a, b = x[0] * math.pi / 2, x[1] * math.pi / 2
    return {"f1": (1 + g) * math.cos(a) * math.cos(b), "f2": (1 + g) * math.cos(a) * math.sin(b),
            "f3": (1 + g) * math.sin(a)}
""",
    "bnh": """
def evaluate(d):
    x1, x2 = d["x1"], d["x2"]
    return {"f1": 4 * x1**2 + 4 * x2**2, "f2": (x1 - 5) ** 2 + (x2 - 5) ** 2,
            "c1": (x1 - 5) ** 2 + x2**2, "c2": (x1 - 8) ** 2 + (x2 + 3) ** 2}
""",
}


def write_problem(folder: Path, name: str, n_var: int = 6) -> Path:
    """Write the case folder of problem ``name`` with ``n_var`` variables (BNH always has 2)."""
    folder.mkdir(parents=True, exist_ok=True)
    if name == "bnh":
        variables = 'x1 = { type = "real", low = 0.0, high = 5.0 }\nx2 = { type = "real", low = 0.0, high = 3.0 }\n'
        objectives = 'f1 = { goal = "min" }\nf2 = { goal = "min" }\n'
        extra = "[constraints]\nc1 = { max = 25.0 }\nc2 = { min = 7.7 }\n"
    else:
        variables = "".join(
            f'x{i} = {{ type = "real", low = 0.0, high = 1.0 }}\n' for i in range(1, n_var + 1)
        )
        names = ("f1", "f2", "f3") if name == "dtlz2" else ("f1", "f2")
        objectives = "".join(f'{o} = {{ goal = "min", worst = 1.1 }}\n' for o in names)
        extra = ""
    (folder / "case.toml").write_text(
        f'title = "{name} ({n_var} variables)"\nmodel = "model.py:evaluate"\n\n'
        f"[variables]\n{variables}\n[objectives]\n{objectives}\n{extra}",
        encoding="utf-8",
    )
    (folder / "model.py").write_text(_MODELS[name].replace("{n}", str(n_var)), encoding="utf-8")
    return folder
