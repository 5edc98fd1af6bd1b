"""Trivial model: two cheap quadratic objectives of five variables."""


def evaluate(design):
    a, b, c, d, e = (design[k] for k in "abcde")
    return {"f1": a * a + b * b + c, "f2": (1 - a) ** 2 + d * e}
