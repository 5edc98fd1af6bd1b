"""DTLZ1, M = 3, k = 5: g = 100 (k + sum((x_i - 0.5)^2 - cos(20 pi (x_i - 0.5)))); front f1 + f2 + f3 = 0.5."""

import math


def evaluate(design):
    x = [design[f"x{i}"] for i in range(1, 8)]
    g = 100 * (5 + sum((xi - 0.5) ** 2 - math.cos(20 * math.pi * (xi - 0.5)) for xi in x[2:]))
    return {
        "f1": 0.5 * x[0] * x[1] * (1 + g),
        "f2": 0.5 * x[0] * (1 - x[1]) * (1 + g),
        "f3": 0.5 * (1 - x[0]) * (1 + g),
    }
