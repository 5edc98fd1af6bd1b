"""Invented mixed-variable model: checks its own inputs, so a bad design raises."""

FINISH_COST = {"bare": 0.0, "anodised": 1.5, "painted": 0.8}
FINISH_LIFE = {"bare": 1.0, "anodised": 2.0, "painted": 1.4}


def evaluate(design):
    w, n, f, fast = design["width"], design["count"], design["finish"], design["fast"]
    assert isinstance(n, int) and -3 <= n <= 7, n
    assert f in FINISH_COST, f
    assert isinstance(fast, bool), fast
    assert 0.5 <= w <= 4.0, w
    cost = 2.0 * w + 0.5 * (n + 3) + FINISH_COST[f] + (1.0 if fast else 0.0)
    life = FINISH_LIFE[f] * (w**0.5) * (1 + 0.1 * (n + 3)) * (0.7 if fast else 1.0)
    return {"cost": cost, "life": life, "load": 0.8 * w + 0.1 * (n + 3)}
