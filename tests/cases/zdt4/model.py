"""ZDT4, n = 10: g = 1 + 10 (n - 1) + sum(x_i^2 - 10 cos(4 pi x_i)); f2 = g (1 - sqrt(f1 / g))."""

import math


def evaluate(design):
    x = [design[f"x{i}"] for i in range(1, 11)]
    g = 1 + 10 * 9 + sum(xi * xi - 10 * math.cos(4 * math.pi * xi) for xi in x[1:])
    return {"f1": x[0], "f2": g * (1 - math.sqrt(x[0] / g))}
