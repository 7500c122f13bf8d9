"""Seeded tables with weaknesses planted on purpose (single values, pairs, three-way), for the
findings and triples tests. Invented noise only: each row's prediction is wrong with a
probability set by the planted effects, so every slice's true error rate is known.

The model's probability is on the correct side of 0.5 exactly when the row is not an error,
with a confidence drawn from U(0.55, 0.95); the label's base rate is 0.3 everywhere, so no
slice is worse through its base rate.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

ATTRIBUTES = {
    "region": ["north", "south", "east", "west", "centre"],
    "plan": ["basic", "plus", "premium"],
    "tenure": ["new", "mid", "long"],
    "channel": ["app", "web", "phone", "agent"],
    "device": ["ios", "android"],
    "shift": ["day", "night"],
    "segment": ["s1", "s2", "s3", "s4", "s5", "s6"],
    "promo": ["yes", "no"],
}


def planted_table(n: int = 20_000, seed: int = 0, *, base: float = 0.15,
                  effects: list[tuple[dict[str, str], float]] = (), parity: tuple[tuple[str, str], ...] = (),
                  parity_size: float = 0.0, attributes: dict | None = None) -> pd.DataFrame:
    """A table with columns ``y``, ``p`` and the attributes.

    ``effects``: (conditions, added error rate) pairs, e.g. ``({"channel": "agent"}, 0.12)``.
    ``parity``: (attribute, value) for three two-valued attributes; the error rate is raised by
    ``parity_size`` where an odd number of them hold and lowered where an even number hold,
    so every single value and every pair of them keeps the base rate (a pure three-way effect).
    """
    attrs = attributes or ATTRIBUTES
    rng = np.random.default_rng(seed)
    cols = {a: rng.choice(levels, n) for a, levels in attrs.items()}
    err = np.full(n, base)
    for cond, add in effects:
        hit = np.ones(n, dtype=bool)
        for a, v in cond.items():
            hit &= cols[a] == v
        err += np.where(hit, add, 0.0)
    if parity:
        odd = np.zeros(n, dtype=int)
        for a, v in parity:
            odd += (cols[a] == v).astype(int)
        err += np.where(odd % 2 == 1, parity_size, -parity_size)
    err = np.clip(err, 0.0, 1.0)
    y = (rng.random(n) < 0.3).astype(int)
    wrong = rng.random(n) < err
    conf = rng.uniform(0.55, 0.95, n)
    p_true = np.where(wrong, 1.0 - conf, conf)  # probability given to the true class
    p = np.where(y == 1, p_true, 1.0 - p_true)
    out = pd.DataFrame(cols)
    out["y"] = y
    out["p"] = np.round(p, 4)
    return out
