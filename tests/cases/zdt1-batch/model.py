"""ZDT1 on a table of designs: f1 = x1, g = 1 + 9 * sum(x2..xn) / (n - 1), f2 = g * (1 - sqrt(f1 / g))."""

import numpy as np


def evaluate(designs):
    x = designs[[f"x{i}" for i in range(1, 31)]].to_numpy()
    g = 1.0 + 9.0 * x[:, 1:].sum(axis=1) / (x.shape[1] - 1)
    f1 = x[:, 0]
    return {"f1": f1, "f2": g * (1.0 - np.sqrt(f1 / g))}
