"""CONSTR: f1 = x1, f2 = (1 + x2) / x1; g1 = x2 + 9 x1 (>= 6), g2 = 9 x1 - x2 (>= 1)."""


def evaluate(design):
    x1, x2 = design["x1"], design["x2"]
    return {"f1": x1, "f2": (1 + x2) / x1, "g1": x2 + 9 * x1, "g2": 9 * x1 - x2}
