"""DTLZ2, M = 3, k = 10: g = sum((x_i - 0.5)^2) over the last k variables; front on the unit sphere."""

import math


def evaluate(design):
    x = [design[f"x{i}"] for i in range(1, 13)]
    g = sum((xi - 0.5) ** 2 for xi in x[2:])
    a, b = x[0] * math.pi / 2, x[1] * math.pi / 2
    return {
        "f1": (1 + g) * math.cos(a) * math.cos(b),
        "f2": (1 + g) * math.cos(a) * math.sin(b),
        "f3": (1 + g) * math.sin(a),
    }
