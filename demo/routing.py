"""Seeded generator of the multi-class demo: the same fictional lender's application-routing
model, which sends each application to one of three desks: approve, refer (to an underwriter)
or decline.

Nothing here comes from real people. The planted weakness is one only a per-class metric
shows: for applications that arrive through a partner retailer (``channel=partner``) the model
leans towards "approve", so applications that should go to an underwriter are approved instead
(recall of "refer" falls), while clear approvals are routed right more often than elsewhere — the
slice's overall error rate stays close to the rest's. See demo/README.md.

    python -m demo.routing --out demo/routing.csv [--rows 20000] [--seed ...]
"""
from __future__ import annotations

import argparse
import os

import numpy as np
import pandas as pd

SEED = 20261202
DESKS = ["approve", "refer", "decline"]
CHANNEL = ["branch", "web", "mobile", "broker", "partner"]
REGION = ["Coastal", "Highlands", "Lakeside", "Metro", "Prairie"]
PRODUCT = ["personal loan", "car loan", "card", "overdraft"]


def generate(rows: int = 20_000, seed: int = SEED) -> pd.DataFrame:
    """The routing table: true desk (decided later by a full review), the model's three
    probabilities, and application attributes."""
    rng = np.random.default_rng(seed)
    channel = rng.choice(CHANNEL, rows, p=[0.22, 0.33, 0.25, 0.08, 0.12])
    region = rng.choice(REGION, rows, p=[0.18, 0.12, 0.15, 0.40, 0.15])
    product = rng.choice(PRODUCT, rows, p=[0.4, 0.2, 0.3, 0.1])
    age_band = rng.choice(["18-29", "30-44", "45-59", "60+"], rows, p=[0.25, 0.35, 0.27, 0.13])
    # A latent credit quality decides the true desk: high -> approve, middle -> refer, low -> decline.
    quality = rng.normal(0.0, 1.0, rows) + np.where(product == "card", 0.2, 0.0)
    desk = np.where(quality > 0.0, 0, np.where(quality > -0.9, 1, 2))
    # The model sees the quality with noise and scores each desk.
    seen = quality + rng.normal(0.0, 0.45, rows)
    logits = np.column_stack([2.4 * seen, 0.9 - 1.6 * np.abs(seen + 0.45) * 1.6, -2.4 * (seen + 0.9)])
    partner = channel == "partner"
    logits[partner, 0] += 1.3  # planted: partner applications lean towards approve
    probs = np.exp(logits - logits.max(axis=1, keepdims=True))
    probs /= probs.sum(axis=1, keepdims=True)
    probs = np.round(probs, 6)
    probs[:, 2] = np.round(1.0 - probs[:, 0] - probs[:, 1], 6)  # rows sum to 1 within 1e-6
    return pd.DataFrame({
        "application_id": [f"R{100000 + i}" for i in range(rows)],
        "channel": channel, "region": region, "product": product, "age_band": age_band,
        "desk": np.array(DESKS)[desk],
        "p_approve": probs[:, 0], "p_refer": probs[:, 1], "p_decline": probs[:, 2],
    })


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Write the routing demo table (synthetic).")
    ap.add_argument("--out", default=os.path.join(os.path.dirname(__file__), "routing.csv"))
    ap.add_argument("--rows", type=int, default=20_000)
    ap.add_argument("--seed", type=int, default=SEED)
    a = ap.parse_args(argv)
    generate(a.rows, a.seed).to_csv(a.out, index=False)
    print(f"wrote {a.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
