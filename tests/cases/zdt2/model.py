"""ZDT2: f1 = x1, g = 1 + 9 * sum(x2..xn) / (n - 1), f2 = g * (1 - (f1 / g) ** 2)."""


def evaluate(design):
    x = [design[f"x{i}"] for i in range(1, 31)]
    g = 1.0 + 9.0 * sum(x[1:]) / (len(x) - 1)
    f1 = x[0]
    return {"f1": f1, "f2": g * (1.0 - (f1 / g) ** 2)}
