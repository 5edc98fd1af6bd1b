"""Two-bar truss: V = x1 sqrt(16 + y^2) + x2 sqrt(1 + y^2); S = max(20 sqrt(16 + y^2) / (y x1), 80 sqrt(1 + y^2) / (y x2))."""

import math


def evaluate(design):
    x1, x2, y = design["x1"], design["x2"], design["y"]
    volume = x1 * math.sqrt(16 + y * y) + x2 * math.sqrt(1 + y * y)
    s_ac = 20 * math.sqrt(16 + y * y) / (y * x1)
    s_bc = 80 * math.sqrt(1 + y * y) / (y * x2)
    stress = max(s_ac, s_bc)
    return {"volume": volume, "stress": stress, "stress_check": stress}
