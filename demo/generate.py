"""Seeded generator of the demo table: a fictional lender's 90-day delinquency model.

Nothing here comes from real people. See demo/README.md for the scenario and the
weaknesses planted on purpose.

    python -m demo.generate --out demo/predictions.csv [--rows 20000] [--seed 7]
"""
from __future__ import annotations

import argparse
import os

import numpy as np
import pandas as pd

SEED = 20261201

AGE = ["18-24", "25-34", "35-44", "45-54", "55-64", "65+"]
REGION = ["Coastal", "Highlands", "Lakeside", "Metro", "Prairie"]
INCOME = ["<25k", "25-50k", "50-80k", "80-120k", "120k+"]
EMPLOYMENT = ["salaried", "hourly", "self-employed", "gig", "retired", "student"]
CHANNEL = ["branch", "web", "mobile", "broker", "partner"]
HOUSING = ["own", "mortgage", "rent", "family"]


def generate(rows: int = 20_000, seed: int = SEED) -> pd.DataFrame:
    """The demo table: one row per applicant, a label, a model probability and attributes."""
    rng = np.random.default_rng(seed)
    age = rng.choice(AGE, rows, p=[0.14, 0.24, 0.21, 0.18, 0.14, 0.09])
    sex = rng.choice(["female", "male"], rows, p=[0.49, 0.51])
    region = rng.choice(REGION, rows, p=[0.18, 0.12, 0.15, 0.40, 0.15])
    income = rng.choice(INCOME, rows, p=[0.16, 0.30, 0.28, 0.17, 0.09]).astype(object)
    emp_p = {"18-24": [0.25, 0.30, 0.05, 0.22, 0.0, 0.18], "65+": [0.15, 0.10, 0.10, 0.03, 0.62, 0.0]}
    employment = np.empty(rows, dtype=object)
    for band in AGE:
        idx = np.flatnonzero(age == band)
        p = emp_p.get(band, [0.52, 0.22, 0.12, 0.09, 0.03, 0.02])
        employment[idx] = rng.choice(EMPLOYMENT, len(idx), p=p)
    channel = rng.choice(CHANNEL, rows, p=[0.22, 0.33, 0.25, 0.12, 0.08])
    housing = rng.choice(HOUSING, rows, p=[0.2, 0.33, 0.37, 0.1])
    tenure = np.round(rng.gamma(2.0, 2.5, rows), 1)  # years at current address

    # True risk of 90-day delinquency (log-odds): mostly the applicant's own repayment
    # history (a latent score the model sees), a little from the attributes.
    history = rng.normal(0.0, 1.5, rows)
    logit = -1.9 + history
    logit += np.select([income == "<25k", income == "25-50k", income == "80-120k", income == "120k+"],
                       [0.45, 0.2, -0.2, -0.4], 0.0)
    logit += np.select([employment == "gig", employment == "student", employment == "salaried"],
                       [0.25, 0.2, -0.15], 0.0)
    logit += np.select([housing == "rent", housing == "own"], [0.15, -0.2], 0.0)
    logit += -0.03 * np.minimum(tenure, 10)
    unseen = rng.normal(0.0, 0.4, rows)
    # Income is missing for some web applications, drawn from a generator of its own so the draws
    # before it stay as they are (the identifiers' shuffle after it changes; Fissure skips them).
    # Leaving income blank is itself a sign of risk (+0.5 log-odds).
    miss = (channel == "web") & (np.random.default_rng(seed + 1).random(rows) < 0.12)
    # Planted weakness 2 (a pair): young gig workers are riskier than the model knows.
    young_gig = (age == "18-24") & (employment == "gig")
    truth_logit = logit + unseen + np.where(young_gig, 1.8, 0.0) + np.where(miss, 0.5, 0.0)
    delinquent = (rng.random(rows) < 1 / (1 + np.exp(-truth_logit))).astype(int)

    # The model sees the history and the attributes, plus its own noise.
    noise_sd = np.where(channel == "broker", 2.4, 0.3)  # weakness 1: broker files are poorly documented
    model_logit = logit + rng.normal(0.0, 1.0, rows) * noise_sd
    p = np.round(1 / (1 + np.exp(-model_logit)), 4)

    # Weakness 3: the model imputes a missing income badly (its probability is cut to 30%) and
    # does not know that a blank income means more risk.
    income[miss] = None
    p = np.where(miss, np.round(p * 0.3, 4), p)

    ids = [f"A{100000 + i}" for i in rng.permutation(rows)]
    return pd.DataFrame({
        "applicant_id": ids, "age_band": age, "sex": sex, "region": region, "income_band": income,
        "employment_type": employment, "channel": channel, "housing": housing, "tenure_years": tenure,
        "delinquent": delinquent, "p_delinquent": p,
    })


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=os.path.join(os.path.dirname(__file__), "predictions.csv"))
    ap.add_argument("--rows", type=int, default=20_000)
    ap.add_argument("--seed", type=int, default=SEED)
    a = ap.parse_args(argv)
    df = generate(a.rows, a.seed)
    tmp = a.out + ".part"
    df.to_csv(tmp, index=False)
    os.replace(tmp, a.out)
    print(f"wrote {a.out}: {len(df)} rows")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
