"""ZDT3: f1 = x1, g = 1 + 9 * sum(x2..xn) / (n - 1), f2 = g * (1 - sqrt(f1/g) - (f1/g) sin(10 pi f1))."""

import math


def evaluate(design):
    x = [design[f"x{i}"] for i in range(1, 31)]
    g = 1.0 + 9.0 * sum(x[1:]) / (len(x) - 1)
    f1 = x[0]
    h = 1.0 - math.sqrt(f1 / g) - (f1 / g) * math.sin(10 * math.pi * f1)
    return {"f1": f1, "f2": g * h}
